/**
 * `fringe spectrum DESIGN`: reflectance, transmittance and absorptance of a design over a
 * wavelength grid, as a table, JSON, CSV and/or an SVG plot.
 */
import { parseCommandArgs } from '../parse-command-args.ts';
import { loadDesign, loadMaterialLibrary } from '../../config/load-design.ts';
import { buildOpticalModel, spectrum, type Polarisation } from '../../model/optics/optical-model.ts';
import { checkTolerances, describeTolerance, frontFaceStack, marginOf, type Tolerance, type ToleranceVerdict } from '../../model/design/tolerances.ts';
import { renderChartStack, type ChartPanel, type ChartPoint, type ChartSeries } from '../../report/index.ts';
import { CliError, numberOption, plotFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';

export const spectrumUsage = `Usage: fringe spectrum DESIGN [options]

Computes R, T and A of a design (fractions 0..1; percent in the table). When the design has
tolerances, the table marks them and the verdict follows: met or missed, with the worst margin
(percentage points, negative when missed), each judged at its own angle, polarisation and face.

  --wavelength L        one wavelength, nm
  --from A --to B       a range, nm (default: the design's band, else 380–780)
  --step S              step of the range, nm (default 1)
  --angle DEG           angle of incidence in the incident medium (default 0)
  --pol s|p|mean        polarisation (default mean, i.e. unpolarised)
  --front               the coated face alone (light entering the substrate): for a coating on
                        thick glass, without the bare back face's reflection
  --json                print {"wavelengthNm": [...], "R": [...], "T": [...], "A": [...]}
                        (and "tolerances", the verdict, when the design has any)
  --csv                 print CSV with a header line
  --plot FILE.svg       write an SVG plot of R and of T, each scaled to its data, tolerances
                        drawn; with --plot the table is printed only if --table asks for it
  --table               print the table (the default without --plot, --json or --csv)
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
      front: { type: 'boolean' },
      table: { type: 'boolean' },
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
  if ([values.json, values.csv, values.table].filter(Boolean).length > 1) throw new CliError('choose one of --json, --csv or --table');
  // A plot is checked before any work, and must be named for what it is.
  const plotFile = values.plot === undefined ? undefined : plotFileOption(values.plot);
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

  const front = values.front === true;
  const model = buildOpticalModel(front ? frontFaceStack(design.stack) : design.stack, grid, angleDeg);
  const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
  spectrum(out, model, pol);
  const shown: Shown = { name: design.name, layerCount: design.layers.length, pol, angleDeg, front };
  const verdict = design.tolerances.length > 0 ? checkTolerances(design.stack, design.tolerances) : undefined;
  // Tolerances judged under what is shown can be drawn on it; the others are only in the verdict.
  const drawn = design.tolerances.filter((t) => sameConditions(t, shown));

  if (plotFile !== undefined) {
    writeOutputFile(plotFile, plotSpectrum(shown, grid, out, drawn, design.band));
    io.err(`wrote ${plotFile}`);
  }

  if (values.json) {
    io.out(
      JSON.stringify({
        wavelengthNm: Array.from(grid),
        R: Array.from(out.R),
        T: Array.from(out.T),
        A: Array.from(out.A),
        ...(verdict ? { tolerances: verdictJson(design.tolerances, verdict) } : {}),
      }),
    );
  } else if (values.csv) {
    const rows = ['wavelength_nm,R,T,A'];
    for (let i = 0; i < grid.length; i++) rows.push(`${grid[i]},${out.R[i]},${out.T[i]},${out.A[i]}`);
    io.out(rows.join('\n'));
  } else {
    const parts: string[] = [];
    if (values.table || plotFile === undefined) parts.push(formatTable(shown, grid, out, design.tolerances));
    if (verdict) parts.push(formatVerdict(design.tolerances, verdict, shown));
    if (parts.length > 0) io.out(parts.join('\n\n'));
  }
  return 0;
}

/** What the table and plot show: the design, and the conditions of the computed spectrum. */
interface Shown {
  name: string;
  layerCount: number;
  pol: Polarisation;
  angleDeg: number;
  front: boolean;
}

function sameConditions(t: Tolerance, shown: Shown): boolean {
  return t.angleDeg === shown.angleDeg && t.pol === shown.pol && (t.face === 'front') === shown.front;
}

function conditions(shown: Shown): string {
  return `${shown.pol === 'mean' ? 'unpolarised' : `${shown.pol}-polarised`}, ${shown.angleDeg}° incidence${shown.front ? ', coated face only' : ''}`;
}

const signedPp = (pp: number): string => `${pp >= 0 ? '+' : '−'}${Math.abs(pp).toFixed(3)} pp`;

function verdictJson(tolerances: readonly Tolerance[], verdict: ToleranceVerdict): object {
  return {
    pass: verdict.pass,
    worstMarginPp: verdict.worstMarginPp,
    each: tolerances.map((t, i) => ({ ...t, ...(verdict.results[i] as object) })),
  };
}

function formatVerdict(tolerances: readonly Tolerance[], verdict: ToleranceVerdict, shown: Shown): string {
  const met = verdict.results.filter((r) => r.pass).length;
  const lines = [
    `Tolerances: ${verdict.pass ? 'PASS' : 'FAIL'}, ${met} of ${tolerances.length} met; worst margin ${signedPp(verdict.worstMarginPp)}`,
  ];
  tolerances.forEach((t, i) => {
    const r = verdict.results[i];
    if (!r) return;
    const note = sameConditions(t, shown) ? '' : ' (judged under its own conditions, not those shown above)';
    lines.push(
      `  ${i + 1}. ${describeTolerance(t)}: ${r.pass ? 'met' : 'MISSED'}, worst margin ${signedPp(r.worstMarginPp)} at ${r.worstAtNm} nm (${t.quantity} ${r.valuePercent.toFixed(3)} %)${note}`,
    );
  });
  return lines.join('\n');
}

/** R and T in two panels, each scaled to its own data (an AR's 0–2 % R would vanish on 0–100 %), tolerances as their bounds. */
function plotSpectrum(
  shown: Shown,
  grid: Float64Array,
  out: { R: Float64Array; T: Float64Array },
  tolerances: readonly Tolerance[],
  band: { fromNm: number; toNm: number } | undefined,
): string {
  const shaded = band !== undefined && (band.fromNm > (grid[0] as number) || band.toNm < (grid[grid.length - 1] as number));
  const panel = (quantity: 'R' | 'T'): ChartPanel => {
    const values = quantity === 'R' ? out.R : out.T;
    const series: ChartSeries[] = [{ label: quantity === 'R' ? 'reflectance R' : 'transmittance T', x: grid, y: values, color: '#1d2733', style: 'solid' }];
    const points: ChartPoint[] = [];
    for (const t of tolerances.filter((tol) => tol.quantity === quantity)) {
      // Indices, not a search per point: the grid may hold a million wavelengths.
      const at = Array.from(grid.keys()).filter((i) => (grid[i] as number) >= t.fromNm && (grid[i] as number) <= t.toNm);
      const inside = at.map((i) => grid[i] as number);
      const r = marginOf(t, inside, at.map((i) => values[i] as number));
      const verdict = inside.length === 0 ? '' : r.pass ? ' (met)' : ' (missed)';
      const range = t.fromNm === t.toNm ? `at ${t.fromNm} nm` : `${t.fromNm}–${t.toNm} nm`;
      const bound = (b: number | undefined, sign: string): void => {
        if (b === undefined) return;
        const label = `${quantity} ${sign} ${b} %, ${range}${verdict}`;
        // A bound at one wavelength is a point, not a line of no length.
        if (t.fromNm === t.toNm) points.push({ x: t.fromNm, y: b / 100, shape: 'circle', label });
        else series.push({ label, x: [t.fromNm, t.toNm], y: [b / 100, b / 100], color: '#b8412f', style: 'dashed', lineWidth: 2 });
      };
      bound(t.atLeastPercent, '≥');
      bound(t.atMostPercent, '≤');
    }
    // Scaled to what is drawn, from zero when the data come near it (a reflectance of 0.1–0.4 %
    // read from 0 says how small it is).
    const drawnValues = [...series.flatMap((x) => Array.from(x.y)), ...points.map((p) => p.y)].filter(Number.isFinite);
    const [lo, hi] = [Math.min(...drawnValues), Math.max(...drawnValues)];
    const span = Math.max(hi - lo, 1e-4);
    const yRange: [number, number] = [lo >= 0 && lo < span ? 0 : lo - 0.05 * span, hi + 0.05 * span];
    return {
      series,
      options: {
        title: `${shown.name}: ${quantity}, ${conditions(shown)}`,
        yRange,
        xLabel: 'Wavelength (nm)',
        yLabel: `${quantity === 'R' ? 'Reflectance R' : 'Transmittance T'} (%)`,
        yPercent: true,
        height: 400,
        points,
        ...(points.length > 0 ? { legend: [{ label: 'tolerance at one wavelength', kind: 'point' as const, shape: 'circle' as const }] } : {}),
        ...(shaded ? { bands: [{ from: band.fromNm, to: band.toNm, label: 'design band' }] } : {}),
      },
    };
  };
  return renderChartStack([panel('R'), panel('T')]);
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
  shown: Shown,
  grid: Float64Array,
  out: { R: Float64Array; T: Float64Array; A: Float64Array },
  tolerances: readonly Tolerance[],
): string {
  const pct = (x: number): string => (x * 100).toFixed(4).padStart(9);
  const mean = (a: Float64Array): number => a.reduce((s, x) => s + x, 0) / a.length;
  const lines = [
    `${shown.name}: ${shown.layerCount} layers, ${conditions(shown)}`,
    `mean over ${grid[0]}–${grid[grid.length - 1]} nm: R ${(mean(out.R) * 100).toFixed(4)} %, T ${(mean(out.T) * 100).toFixed(4)} %`,
    '',
    `  λ (nm)      R (%)     T (%)     A (%)${tolerances.some((t) => sameConditions(t, shown)) ? '  tolerance (#, margin)' : ''}`,
  ];
  for (let i = 0; i < grid.length; i++) {
    const w = grid[i] as number;
    // Each tolerance over this wavelength, with this row's margin: "R ≤ 0.6 ok +0.21".
    const marks = tolerances.flatMap((t, k) => {
      if (w < t.fromNm || w > t.toNm || !sameConditions(t, shown)) return [];
      const r = marginOf(t, [w], [(t.quantity === 'R' ? out.R : out.T)[i] as number]);
      return [`#${k + 1} ${r.pass ? 'ok' : 'MISS'} ${signedPp(r.worstMarginPp)}`];
    });
    lines.push(`${String(w).padStart(8)}  ${pct(out.R[i] as number)} ${pct(out.T[i] as number)} ${pct(out.A[i] as number)}${marks.length > 0 ? `  ${marks.join('; ')}` : ''}`);
  }
  return lines.join('\n');
}
