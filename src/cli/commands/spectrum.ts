/**
 * `fringe spectrum DESIGN`: reflectance, transmittance and absorptance of a design over a
 * wavelength grid, as a table, JSON, CSV and/or an SVG plot.
 */
import { parseCommandArgs } from '../parse-command-args.ts';
import { loadDesign, loadMaterialLibrary } from '../../config/load-design.ts';
import { buildOpticalModel, spectrum, type Polarisation } from '../../model/optics/optical-model.ts';
import { renderLineChart } from '../../report/index.ts';
import { CliError, numberOption, outputFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';

export const spectrumUsage = `Usage: fringe spectrum DESIGN [options]

Computes R, T and A of a design (fractions 0..1; percent in the table).

  --wavelength L        one wavelength, nm
  --from A --to B       a range, nm (default: the design's band, else 380–780)
  --step S              step of the range, nm (default 1)
  --angle DEG           angle of incidence in the incident medium (default 0)
  --pol s|p|mean        polarisation (default mean, i.e. unpolarised)
  --json                print {"wavelengthNm": [...], "R": [...], "T": [...], "A": [...]}
  --csv                 print CSV with a header line
  --plot FILE.svg       also write an SVG plot of R and T
  --materials FILE      material library (default: the shipped config/materials.yaml)
`;

const MAX_POINTS = 1_000_000;

export function runSpectrum(argv: string[], io: CommandIo): number {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      wavelength: { type: 'string' },
      from: { type: 'string' },
      to: { type: 'string' },
      step: { type: 'string' },
      angle: { type: 'string' },
      pol: { type: 'string' },
      json: { type: 'boolean' },
      csv: { type: 'boolean' },
      plot: { type: 'string' },
      materials: { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(spectrumUsage);
    return 0;
  }
  if (positionals.length !== 1) throw new CliError('spectrum needs exactly one DESIGN file (see fringe spectrum --help)');
  if (values.json && values.csv) throw new CliError('choose one of --json or --csv');
  const pol = (values.pol ?? 'mean') as Polarisation;
  if (!['s', 'p', 'mean'].includes(pol)) throw new CliError(`--pol must be s, p or mean, got "${values.pol}"`);
  const angleDeg = numberOption('angle', values.angle) ?? 0;
  if (!(angleDeg >= 0 && angleDeg < 90)) throw new CliError(`--angle must be at least 0 and below 90 degrees, got ${angleDeg}`);

  const library = loadMaterialLibrary(values.materials);
  const design = loadDesign(positionals[0] as string, library);
  const grid = wavelengthGrid(values, design.band);

  // Refuse wavelengths outside the data of any library material the design uses.
  const [lo, hi] = [grid[0] as number, grid[grid.length - 1] as number];
  for (const name of new Set([design.incidentName, design.substrateName, ...design.layers.map((l) => l.materialName)])) {
    const range = library.materials[name]?.validRangeNm;
    if (range && (lo < range[0] || hi > range[1])) {
      throw new CliError(`${name} has data for ${range[0]}–${range[1]} nm only; the requested range is ${lo}–${hi} nm`, 1);
    }
  }

  const model = buildOpticalModel(design.stack, grid, angleDeg);
  const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
  spectrum(out, model, pol);

  if (values.plot !== undefined) {
    const svg = renderLineChart(
      [
        { label: 'R', x: grid, y: out.R },
        { label: 'T', x: grid, y: out.T },
      ],
      {
        title: `${design.name}: ${pol === 'mean' ? 'unpolarised' : `${pol}-polarised`}, ${angleDeg}°`,
        xLabel: 'Wavelength (nm)',
        yLabel: 'R, T (%)',
        yPercent: true,
        yRange: [0, 1],
        ...(design.band ? { bands: [{ from: design.band.fromNm, to: design.band.toNm, label: 'design band' }] } : {}),
      },
    );
    writeOutputFile(outputFileOption('plot', values.plot), svg);
    io.err(`wrote ${values.plot}`);
  }

  if (values.json) {
    io.out(JSON.stringify({ wavelengthNm: Array.from(grid), R: Array.from(out.R), T: Array.from(out.T), A: Array.from(out.A) }));
  } else if (values.csv) {
    const rows = ['wavelength_nm,R,T,A'];
    for (let i = 0; i < grid.length; i++) rows.push(`${grid[i]},${out.R[i]},${out.T[i]},${out.A[i]}`);
    io.out(rows.join('\n'));
  } else {
    io.out(formatTable(design.name, design.layers.length, pol, angleDeg, grid, out));
  }
  return 0;
}

function wavelengthGrid(
  values: { wavelength?: string | undefined; from?: string | undefined; to?: string | undefined; step?: string | undefined },
  band: { fromNm: number; toNm: number } | undefined,
): Float64Array {
  const single = numberOption('wavelength', values.wavelength);
  if (single !== undefined) {
    if (values.from !== undefined || values.to !== undefined || values.step !== undefined) {
      throw new CliError('give either --wavelength or --from/--to/--step, not both');
    }
    if (!(single > 0)) throw new CliError(`--wavelength must be positive, got ${single}`);
    return Float64Array.of(single);
  }
  const from = numberOption('from', values.from) ?? band?.fromNm ?? 380;
  const to = numberOption('to', values.to) ?? band?.toNm ?? 780;
  const step = numberOption('step', values.step) ?? 1;
  if (!(from > 0)) throw new CliError(`--from must be positive, got ${from}`);
  if (!(to > from)) throw new CliError(`--to (${to}) must be above --from (${from})`);
  if (!(step > 0)) throw new CliError(`--step must be positive, got ${step}`);
  const count = Math.floor((to - from) / step + 1e-9) + 1;
  if (count > MAX_POINTS) throw new CliError(`that grid has ${count} points; the most is ${MAX_POINTS}`);
  // Computed from the index, not accumulated, so the grid has no rounding drift.
  return Float64Array.from({ length: count }, (_, i) => Number((from + i * step).toPrecision(12)));
}

function formatTable(
  name: string,
  layerCount: number,
  pol: Polarisation,
  angleDeg: number,
  grid: Float64Array,
  out: { R: Float64Array; T: Float64Array; A: Float64Array },
): string {
  const pct = (x: number): string => (x * 100).toFixed(4).padStart(9);
  const mean = (a: Float64Array): number => a.reduce((s, x) => s + x, 0) / a.length;
  const lines = [
    `${name}: ${layerCount} layers, ${pol === 'mean' ? 'unpolarised' : `${pol}-polarised`}, ${angleDeg}° incidence`,
    `mean over ${grid[0]}–${grid[grid.length - 1]} nm: R ${(mean(out.R) * 100).toFixed(4)} %, T ${(mean(out.T) * 100).toFixed(4)} %`,
    '',
    '  λ (nm)      R (%)     T (%)     A (%)',
  ];
  for (let i = 0; i < grid.length; i++) {
    lines.push(`${String(grid[i]).padStart(8)}  ${pct(out.R[i] as number)} ${pct(out.T[i] as number)} ${pct(out.A[i] as number)}`);
  }
  return lines.join('\n');
}
