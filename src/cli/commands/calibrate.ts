/**
 * `fringe calibrate RUN… [--measured FILE.csv]…`: the chamber's hidden factors (film index,
 * chip ratio and tooling factor per material) and every layer's thickness on the parts, from
 * finished runs and the parts' measured spectra (src/calibrate/).
 */
import { readFileSync, renameSync, writeFileSync } from 'node:fs';
import { dirname, join, relative, resolve } from 'node:path';
import { parseArgs } from 'node:util';
import { Document, parseDocument } from 'yaml';
import { calibrate, CalibrationDataError, chamberProfile, collectRunData, MeasuredSpectrumError, readMeasuredSpectrum, type CalibrationResult, type RunData, type SpectrumData } from '../../calibrate/index.ts';
import { readYamlFile } from '../../config/read-config.ts';
import { scaledDispersion } from '../../model/optics/dispersion.ts';
import { buildOpticalModel, spectrum, type StackSpec } from '../../model/optics/optical-model.ts';
import { DEFAULT_RATE_NM_PER_S } from '../../model/plan/recipe.ts';
import { renderLineChart, type ChartSeries } from '../../report/index.ts';
import { CliError, outputFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { readRecordedRecipe, readRecordedRun, warnOfDamage } from '../run-folder.ts';

export const calibrateUsage = `Usage: fringe calibrate RUN [--measured FILE.csv]… [RUN [--measured FILE.csv]…]… [options]

Fits the chamber's hidden factors — each material's film index factor, chip ratio and tooling
factor — and every layer's thickness on the parts to everything the runs recorded (the optical
monitor's readings, the crystal's, and the parts' measured spectra), by least squares on the
physics. Several runs are pooled: the factors are shared, the layers are each run's own.

  --measured FILE       a measured spectrum of the parts of the run named before it: two
                        columns, wavelength in nm and T or R, in % or as a fraction (detected),
                        separated by commas, semicolons, tabs or spaces; a header line allowed
  --quantity T|R        what the measured files hold (default T)
  --scale percent|fraction   say how the measured values are written instead of detecting it
  --json                print one object: materials, layers, residuals, warnings, correlation
  --out RECIPE.yaml     write the next run's recipe: --recipe's file with the corrected chip
                        ratios and tooling factors (the design untouched)
  --recipe FILE         the recipe file the run was made with (for --out)
  --plot FILE.svg       the measured spectra over the design's and the calibrated model's
  --profile-out FILE    write a simulator profile of this chamber as calibrated (chip ratio,
                        tooling and index errors against the first run's recipe; rates, ramps,
                        fluctuation and shutter delays from the journal; the monitor's noise and
                        drifts, the crystal's noise), for fringe simulate --profile

The calibration is kept beside each run as calibration.json.
`;

export function runCalibrate(argv: string[], io: CommandIo): number {
  const { values, tokens } = parseArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    tokens: true,
    options: {
      measured: { type: 'string', multiple: true },
      quantity: { type: 'string' },
      scale: { type: 'string' },
      json: { type: 'boolean' },
      out: { type: 'string' },
      'profile-out': { type: 'string' },
      recipe: { type: 'string' },
      plot: { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(calibrateUsage);
    return 0;
  }
  const quantity = values.quantity ?? 'T';
  if (quantity !== 'T' && quantity !== 'R') throw new CliError(`--quantity must be T or R, got "${quantity}"`);
  const scale = values.scale;
  if (scale !== undefined && scale !== 'percent' && scale !== 'fraction') throw new CliError(`--scale must be percent or fraction, got "${scale}"`);
  // Each --measured belongs to the run named before it (the first run when it comes first).
  const targets: string[] = [];
  const measuredFor: { run: number; file: string }[] = [];
  for (const token of tokens) {
    if (token.kind === 'positional') targets.push(token.value);
    else if (token.kind === 'option' && token.name === 'measured' && token.value !== undefined) measuredFor.push({ run: Math.max(0, targets.length - 1), file: token.value });
  }
  if (targets.length === 0) throw new CliError('calibrate needs at least one RUN folder (see fringe calibrate --help)');
  if (values.out !== undefined) {
    if (values.recipe === undefined) throw new CliError('--out needs --recipe FILE, the recipe file the run was made with, to correct');
    outputFileOption('out', values.out);
  }
  if (values.plot !== undefined) outputFileOption('plot', values.plot);
  if (values['profile-out'] !== undefined) outputFileOption('profile-out', values['profile-out']);

  const runs: RunData[] = [];
  const dirs: string[] = [];
  for (const target of targets) {
    const run = readRecordedRun(target);
    const recipe = readRecordedRecipe(run.dir, 'calibrate needs the recipe the run was made with');
    let data: RunData;
    try {
      data = collectRunData(run.journal.header.runId, recipe, run.journal.records);
    } catch (error) {
      if (error instanceof CalibrationDataError) throw new CliError(error.message, 1);
      throw error;
    }
    warnOfDamage(run, io);
    runs.push(data);
    dirs.push(run.dir);
  }
  const spectra: SpectrumData[] = measuredFor.map(({ run, file }) => {
    try {
      return { run, spectrum: readMeasuredSpectrum(file, { quantity, ...(scale ? { scale } : {}) }) };
    } catch (error) {
      if (error instanceof MeasuredSpectrumError) throw new CliError(error.message, 1);
      throw error;
    }
  });

  const result = calibrate(runs, spectra);
  const chamber = chamberProfile(result, runs);
  const record = {
    ...jsonOf(result),
    runs: runs.map((r, i) => ({ id: r.label, dir: dirs[i] })),
    measured: spectra.map((s) => ({ file: s.spectrum.source, run: s.run, quantity: s.spectrum.quantity, read: s.spectrum.scale, because: s.spectrum.scaleReason })),
    // The virtual chamber `fringe whatif` runs on (errors against the first run's recipe).
    ...('profile' in chamber ? { profile: chamber.profile } : { profileProblem: chamber.problem }),
  };
  for (const dir of new Set(dirs)) writeAtomically(join(dir, 'calibration.json'), `${JSON.stringify(record, null, 2)}\n`);
  if (values.out !== undefined) writeOutputFile(values.out, correctedRecipe(values.recipe as string, values.out, result, runs, spectra));
  if (values.plot !== undefined) writeOutputFile(values.plot, plotOf(result, runs, spectra));
  if (values['profile-out'] !== undefined) {
    // The calibration is kept (above) even when its chamber cannot be written as a profile.
    if ('problem' in chamber) throw new CliError(`--profile-out: ${chamber.problem}; the calibration itself is kept in calibration.json`, 1);
    writeOutputFile(values['profile-out'], profileFile(chamber.profile, runs));
  }
  io.out(values.json ? JSON.stringify(record) : formatTable(result, runs, spectra));
  return 0;
}

/** The JSON the issue fixes: materials, layers, residuals, warnings (and the correlation table after them). */
function jsonOf(result: CalibrationResult): Record<string, unknown> {
  const materials: Record<string, unknown> = {};
  for (const [name, m] of Object.entries(result.materials)) {
    materials[name] = { indexFactor: m.indexFactor, chipRatio: m.chipRatio, toolingFactor: m.toolingFactor };
  }
  const residuals: Record<string, unknown> = {};
  for (const r of result.residuals) residuals[r.data] = { points: r.points, rms: r.rms, ratio: r.ratio };
  return {
    materials,
    layers: result.layers.map((l) => ({ number: l.number, partNm: l.partNm, sigmaNm: l.sigmaNm, ...(result.layers.some((x) => x.run > 0) ? { run: l.run } : {}) })),
    residuals,
    warnings: result.warnings,
    correlation: result.correlation,
    birgeRatio: result.birgeRatio,
  };
}

function writeAtomically(file: string, text: string): void {
  const temp = `${file}.${process.pid}.tmp`;
  try {
    writeFileSync(temp, text);
    renameSync(temp, file);
  } catch (error) {
    throw new CliError(`cannot write ${file}: ${(error as Error).message}`, 1);
  }
}

function formatTable(result: CalibrationResult, runs: readonly RunData[], spectra: readonly SpectrumData[]): string {
  const pct = (v: { value: number; sigma: number }, digits = 4): string => `${v.value.toFixed(digits)} ± ${v.sigma.toFixed(digits)}`;
  const rows = [
    `calibration from ${runs.map((r) => r.label).join(', ')}${spectra.length ? ` and ${spectra.map((s) => s.spectrum.source).join(', ')}` : ' (no measured spectrum)'}`,
    '',
    'material   index factor        chip ratio (recipe)          tooling factor (recipe)',
  ];
  for (const [name, m] of Object.entries(result.materials)) {
    rows.push(
      `${name.padEnd(10)} ${pct(m.indexFactor).padEnd(19)} ${pct(m.chipRatio).padEnd(19)} (${m.recipeChipRatio.toFixed(4)})   ${pct(m.toolingFactor).padEnd(19)} (${m.recipeToolingFactor.toFixed(4)})`,
    );
  }
  rows.push('', `${runs.length > 1 ? 'run ' : ''} #  material  target nm   parts nm   ± nm`);
  for (const l of result.layers) {
    rows.push(`${runs.length > 1 ? `${String(l.run + 1).padStart(3)} ` : ''}${String(l.number).padStart(2)}  ${l.material.padEnd(8)} ${l.targetNm.toFixed(2).padStart(9)} ${l.partNm.toFixed(2).padStart(10)} ${l.sigmaNm.toFixed(2).padStart(6)}`);
  }
  rows.push('', 'residuals:');
  for (const r of result.residuals) rows.push(`  ${r.data}: ${r.points} points, rms ${r.rms.toPrecision(3)}, ${r.ratio.toFixed(2)}× the noise`);
  const names = result.correlation.names;
  rows.push('', 'correlations of the factors:', `${''.padEnd(22)}${names.map((_, i) => String(i + 1).padStart(6)).join('')}`);
  names.forEach((n, i) => rows.push(`${`${i + 1} ${n}`.padEnd(22).slice(0, 22)}${(result.correlation.matrix[i] as number[]).map((c) => c.toFixed(2).padStart(6)).join('')}`));
  if (result.warnings.length > 0) rows.push('', ...result.warnings.map((w) => `note: ${w}`));
  return rows.join('\n');
}

/** The recipe file with each material's chip ratio and tooling factor replaced by the calibrated ones; a comment says where they came from. */
function correctedRecipe(file: string, outFile: string, result: CalibrationResult, runs: readonly RunData[], spectra: readonly SpectrumData[]): string {
  readYamlFile(file); // refuses a bad file in one sentence, as every configuration file
  const doc = parseDocument(readFileSync(file, 'utf8'));
  // A design named by a path is named from where the new recipe lies.
  const design = doc.get('design');
  if (typeof design === 'string') doc.set('design', relative(dirname(resolve(outFile)), resolve(dirname(file), design)));
  for (const [name, m] of Object.entries(result.materials)) {
    // A material the recipe left to `default` gets its own entry, at the rate it ran at.
    if (doc.getIn(['process', name]) === undefined) {
      const rate = doc.getIn(['process', 'default', 'rateNmPerS']);
      doc.setIn(['process', name], doc.createNode({ rateNmPerS: typeof rate === 'number' ? rate : DEFAULT_RATE_NM_PER_S }));
    }
    doc.setIn(['process', name, 'chipRatio'], round(m.chipRatio.value));
    doc.setIn(['process', name, 'toolingFactor'], round(m.toolingFactor.value));
  }
  const indexNote = Object.entries(result.materials)
    .map(([name, m]) => `${name} n × ${m.indexFactor.value.toFixed(4)} ± ${m.indexFactor.sigma.toFixed(4)}`)
    .join(', ');
  const sources = [...runs.map((r) => `run ${r.label}`), ...spectra.map((s) => `measured ${s.spectrum.source}`)].join(', ');
  doc.commentBefore = [
    ` Calibrated by fringe calibrate from ${sources}:`,
    ' chip ratios and tooling factors corrected; the design is unchanged.',
    ` Film indices as deposited (index factors over the library's; the controller fits them live): ${indexNote}.`,
    ...(doc.commentBefore ? [doc.commentBefore] : []),
  ].join('\n');
  return doc.toString();
}

function round(x: number): number {
  return Math.round(x * 1e5) / 1e5;
}

function plotOf(result: CalibrationResult, runs: readonly RunData[], spectra: readonly SpectrumData[]): string {
  const series: ChartSeries[] = [];
  spectra.forEach((s, i) => {
    const run = runs[s.run] as RunData;
    const recipe = run.recipe;
    const grid = s.spectrum.wavelengthsNm;
    const pick = (spec: StackSpec): Float64Array => {
      const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
      spectrum(out, buildOpticalModel(spec, grid, 0), 's');
      return s.spectrum.quantity === 'T' ? out.T : out.R;
    };
    const layers = result.layers.filter((l) => l.run === s.run);
    const calibrated: StackSpec = {
      ...recipe.design.stack,
      layers: recipe.layers.map((l, k) => ({
        dispersion: scaledDispersion(l.dispersion, result.materials[l.materialName]?.indexFactor.value ?? 1, 0),
        thicknessNm: layers.find((x) => x.number === k + 1)?.partNm ?? 0,
      })),
    };
    series.push({ label: `measured ${s.spectrum.source.split('/').pop() ?? ''}`, x: grid, y: s.spectrum.values });
    if (i === 0) series.push({ label: 'design', x: grid, y: pick(recipe.design.stack) });
    series.push({ label: `calibrated model${spectra.length > 1 ? ` ${i + 1}` : ''}`, x: grid, y: pick(calibrated) });
  });
  if (series.length === 0) {
    const recipe = (runs[0] as RunData).recipe;
    const band = recipe.design.band ?? { fromNm: 400, toNm: 800 };
    const grid = Float64Array.from({ length: Math.floor(band.toNm - band.fromNm) + 1 }, (_, k) => band.fromNm + k);
    const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
    spectrum(out, buildOpticalModel(recipe.design.stack, grid, 0), 's');
    series.push({ label: 'design (no measured spectrum given)', x: grid, y: out.T });
  }
  return renderLineChart(series, { title: `Calibration: ${runs.map((r) => r.label).join(', ')}`, xLabel: 'Wavelength (nm)', yLabel: spectra[0]?.spectrum.quantity ?? 'T', yPercent: true });
}


/** The chamber as calibrated, as a simulator profile file (errors against the first run's recipe). */
function profileFile(profile: Record<string, unknown>, runs: readonly RunData[]): string {
  const doc = new Document(profile);
  doc.commentBefore = ` Simulator profile written by fringe calibrate from ${runs.map((r) => `run ${r.label}`).join(', ')}:\n errors are against the recipe of the first run.`;
  return doc.toString();
}
