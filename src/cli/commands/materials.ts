/** `fringe materials [NAME]`: the material library's entries, their data range, dispersion and sources; a plot of n and k. */
import { parseCommandArgs } from '../parse-command-args.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { nearestNames } from '../../config/validation.ts';
import { indexAt, type Dispersion } from '../../model/optics/dispersion.ts';
import type { Material } from '../../model/optics/material.ts';
import { renderLineChart, type ChartSeries } from '../../report/index.ts';
import { CliError, outputFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';

export const materialsUsage = `Usage: fringe materials [NAME] [--plot FILE.svg] [--json] [--materials FILE]

Without NAME: every entry of the material library, one a line: its form (film or bulk), its
data range, n and k at 550 nm (or the middle of its range), density and Z-ratio. With NAME:
that entry whole: description, dispersion model and coefficients, n and k across its range,
density, shear modulus, Z-ratio and the source of each value.

  --plot FILE.svg       draw n and k over each entry's range (NAME's alone, or every entry's n)
  --json                print the entries as the library holds them
  --materials FILE      material library (default: the shipped config/materials.yaml)
`;

export function runMaterials(argv: string[], io: CommandIo): number {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: { plot: { type: 'string' }, json: { type: 'boolean' }, materials: { type: 'string' }, help: { type: 'boolean', short: 'h' } },
  });
  if (values.help) {
    io.out(materialsUsage);
    return 0;
  }
  if (positionals.length > 1) throw new CliError('materials takes at most one NAME (see fringe materials --help)');
  if (values.plot !== undefined && !/\.svg$/i.test(values.plot)) throw new CliError(`--plot writes an SVG file and its name must end in .svg, got "${values.plot}"`);
  const plotFile = values.plot === undefined ? undefined : outputFileOption('plot', values.plot);
  const library = loadMaterialLibrary(values.materials);
  const name = positionals[0];
  let entries = Object.entries(library.materials);
  if (name !== undefined) {
    const entry = library.materials[name];
    if (!Object.hasOwn(library.materials, name) || !entry) {
      const near = nearestNames(name, Object.keys(library.materials));
      throw new CliError(`no material "${name}" in the library${near.length > 0 ? `; nearest: ${near.join(', ')}` : ''} (fringe materials lists them)`, 1);
    }
    entries = [[name, entry]];
  }
  if (plotFile !== undefined) {
    writeOutputFile(plotFile, plotMaterials(entries));
    io.err(`wrote ${plotFile}`);
  }
  if (values.json) io.out(JSON.stringify(Object.fromEntries(entries)));
  else io.out(name === undefined ? formatList(entries) : formatEntry(name, entries[0]?.[1] as Material));
  return 0;
}

/** 550 nm when the data reach it, else the middle of the range. */
function lookWavelength(m: Material): number {
  const [lo, hi] = m.validRangeNm;
  return lo <= 550 && 550 <= hi ? 550 : Math.round((lo + hi) / 2);
}

function nk(d: Dispersion, wavelengthNm: number): { n: number; k: number } {
  return indexAt({ n: 0, k: 0 }, d, wavelengthNm);
}

function formatList(entries: readonly [string, Material][]): string {
  const rows = [' name        form  range nm        λ nm       n        k  density  Z-ratio  dispersion'];
  for (const [name, m] of entries) {
    const at = lookWavelength(m);
    const { n, k } = nk(m.dispersion, at);
    rows.push(
      `${name.padEnd(11)} ${m.form.padEnd(4)} ${`${m.validRangeNm[0]}–${m.validRangeNm[1]}`.padEnd(13)} ${String(at).padStart(6)} ${n.toFixed(4).padStart(7)} ${formatK(k).padStart(8)} ${m.densityGPerCm3.toFixed(2).padStart(8)} ${m.zRatio.toFixed(3).padStart(8)}  ${m.dispersion.model}`,
    );
  }
  rows.push('', `${entries.length} entries; fringe materials NAME shows one whole, with its sources.`);
  return rows.join('\n');
}

function formatEntry(name: string, m: Material): string {
  const [lo, hi] = m.validRangeNm;
  const rows = [
    `${name}: ${m.description}`,
    `  form            ${m.form === 'film' ? 'film (deposited-layer constants)' : 'bulk (glass or crystal)'}`,
    `  data range      ${lo}–${hi} nm (fringe refuses wavelengths outside it)`,
    `  dispersion      ${describeDispersion(m.dispersion)}`,
    `  density         ${m.densityGPerCm3} g/cm³`,
    `  shear modulus   ${m.shearModulusGPa} GPa`,
    `  Z-ratio         ${m.zRatio}`,
    '  sources',
    `    index         ${m.sources.index}`,
    `    density       ${m.sources.density}`,
    `    shear modulus ${m.sources.shearModulus}`,
    '',
    '   λ nm        n          k',
  ];
  for (let i = 0; i <= 8; i++) {
    const w = lo + ((hi - lo) * i) / 8;
    const { n, k } = nk(m.dispersion, w);
    rows.push(`${w.toFixed(1).padStart(7)} ${n.toFixed(5).padStart(8)} ${formatK(k).padStart(10)}`);
  }
  return rows.join('\n');
}

function describeDispersion(d: Dispersion): string {
  switch (d.model) {
    case 'constant':
      return `constant: n = ${d.n}, k = ${d.k}`;
    case 'cauchy':
      return `Cauchy (λ in µm): n = ${series(d.n)}${d.k.length > 0 ? `; k = ${series(d.k)}` : '; k = 0'}`;
    case 'sellmeier':
      return `Sellmeier (λ in µm, C in ${d.cUnit === 'um2' ? 'µm²' : 'µm, squared'}): n² = ${d.A} + Σ Bλ²/(λ² − C) with ${d.terms.map((t) => `B = ${t.B}, C = ${t.C}`).join('; ')}; k = ${d.k}`;
    case 'table':
      return `table of ${d.points.length} rows of nm, n, k (interpolated linearly)`;
  }
}

function series(c: readonly number[]): string {
  return c.map((v, i) => (i === 0 ? `${v}` : `${v}/λ^${2 * i}`)).join(' + ');
}

/** Dielectrics' k is tiny (1e-5), metals' large (3–7): each in the form that reads. */
function formatK(k: number): string {
  if (k === 0) return '0';
  return k >= 0.01 ? k.toFixed(4) : k.toExponential(2);
}

/** n (and, for one entry, k on its own chart below) over each entry's range. */
function plotMaterials(entries: readonly [string, Material][]): string {
  const sample = (m: Material, of: 'n' | 'k'): ChartSeries & { label: string } => {
    const [lo, hi] = m.validRangeNm;
    const x = Array.from({ length: 201 }, (_, i) => lo + ((hi - lo) * i) / 200);
    return { label: '', x, y: x.map((w) => nk(m.dispersion, w)[of]) };
  };
  if (entries.length === 1) {
    const [name, m] = entries[0] as [string, Material];
    const n = { ...sample(m, 'n'), label: `${name}: n` };
    const k = { ...sample(m, 'k'), label: `${name}: k` };
    const top = renderLineChart([n], { title: `${name}: refractive index n`, xLabel: 'Wavelength (nm)', yLabel: 'n', idPrefix: 'materials-n' });
    const bottom = renderLineChart([k], { title: `${name}: extinction coefficient k`, xLabel: 'Wavelength (nm)', yLabel: 'k', idPrefix: 'materials-k', ...(Array.from(k.y).every((v) => v === 0) ? { yRange: [0, 1] as [number, number] } : {}) });
    return stackSvgs([top, bottom]);
  }
  return renderLineChart(
    entries.map(([name, m]) => ({ ...sample(m, 'n'), label: name })),
    { title: 'Refractive index n of the library’s entries', xLabel: 'Wavelength (nm)', yLabel: 'n', width: 1000, height: 620 },
  );
}

/** Two standalone SVG documents one above the other, as one document. */
function stackSvgs(documents: readonly string[]): string {
  const size = (svg: string): [number, number] => {
    const m = /<svg[^>]*width="(\d+)"[^>]*height="(\d+)"/.exec(svg);
    return [Number(m?.[1] ?? 800), Number(m?.[2] ?? 480)];
  };
  const width = Math.max(...documents.map((d) => size(d)[0]));
  let y = 0;
  const parts = documents.map((d) => {
    const inner = d.replace(/^<\?xml[^>]*>\s*/, '').replace(/^<svg /, `<svg y="${y}" `);
    y += size(d)[1];
    return inner;
  });
  return `<?xml version="1.0" encoding="UTF-8"?>\n<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="${width}" height="${y}" viewBox="0 0 ${width} ${y}">\n${parts.join('\n')}\n</svg>\n`;
}
