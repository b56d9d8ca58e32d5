/**
 * `fringe whatif RUN --recipe FILE`: a changed recipe or strategy run N times on the virtual
 * chamber the run's calibration describes, beside what the run itself deposited
 * (src/study/whatif.ts).
 */
import { existsSync, readFileSync } from 'node:fs';
import { join, resolve } from 'node:path';
import { z } from 'zod';
import { SimProfileSchema, type SimProfile } from '../../../sim/index.ts';
import { rebaseProfile } from '../../calibrate/index.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { journalEstimator } from '../../journal/journal-format.ts';
import { renderLineChart } from '../../report/index.ts';
import { designMismatch, runWhatIf, type RecordedDeposit, type WhatIfReport } from '../../study/whatif.ts';
import { CliError, estimatorOption, plotFileOption, seededRunsOptions, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { parseCommandArgs } from '../parse-command-args.ts';
import { createProgressBar } from '../progress-bar.ts';
import { readRecordedRecipe, readRecordedRun } from '../run-folder.ts';

export const MAX_WHATIF_RUNS = 10_000;

export const whatifUsage = `Usage: fringe whatif RUN --recipe FILE [options]

Runs FILE — the recorded run's design with another strategy: cut modes, monitor wavelengths,
chip changes, shutter delays, estimator — N times with fresh noise on a virtual chamber built
from the run's calibration (fringe calibrate RUN: its chip ratios, tooling factors and film
indices, and the rates, ramps, fluctuation, shutter delays and instrument noise its journal
showed), and reports beside what the calibration says the run deposited: per layer the n·d
error (% of the design's; the what-if's mean and rms over the runs), and the final spectrum
against the design (largest |ΔT| over the band, and the yield where the design has tolerances).

  --recipe FILE         the changed recipe (YAML), for the recorded run's design
  --runs N              what-if runs (default 20, at most ${MAX_WHATIF_RUNS})
  --estimator fit|plain cut optical layers on the model fit or the plain rules (default: as the
                        run did); the recipe's compensation block turns compensation on
  --seed N              first seed (default 1): the same seeds give the same what-if
  --workers N           worker threads (default: the machine's cores)
  --json                print the report as one object
  --plot FILE.svg       the recorded run's final spectrum, the what-if runs' band and the design
  --materials FILE      material library (default: the shipped config/materials.yaml)
`;

/** The parts of calibration.json the what-if reads; the rest is the calibration's own. */
const CalibrationFileSchema = z.object({
  materials: z.record(z.string(), z.object({ indexFactor: z.object({ value: z.number(), sigma: z.number() }), chipRatio: z.object({ value: z.number() }), toolingFactor: z.object({ value: z.number() }) })),
  layers: z.array(z.object({ number: z.number(), partNm: z.number(), sigmaNm: z.number(), run: z.number().optional() })),
  runs: z.array(z.object({ id: z.string(), dir: z.string() })).optional(),
  profile: z.unknown().optional(),
  profileProblem: z.string().optional(),
});

export async function runWhatIfCommand(argv: string[], io: CommandIo): Promise<number> {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      recipe: { type: 'string' },
      runs: { type: 'string' },
      estimator: { type: 'string' },
      seed: { type: 'string' },
      workers: { type: 'string' },
      json: { type: 'boolean' },
      plot: { type: 'string' },
      materials: { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(whatifUsage);
    return 0;
  }
  if (positionals.length !== 1) throw new CliError('whatif needs exactly one RUN folder (see fringe whatif --help)');
  if (values.recipe === undefined) throw new CliError('whatif needs --recipe FILE, the changed recipe to try on the calibrated chamber');
  const { runs, firstSeed, workers } = seededRunsOptions(values, 20, MAX_WHATIF_RUNS);
  if (values.plot !== undefined) plotFileOption(values.plot);

  const target = positionals[0] as string;
  if (!existsSync(target)) throw new CliError(`no run at ${target}: give a run folder (runs/<id>) or its journal.ndjson`, 1);
  const run = readRecordedRun(target);
  const recorded = readRecordedRecipe(run.dir, 'the what-if needs the recipe the run was made with');
  const calibration = readCalibration(run.dir, target);
  const estimator = estimatorOption(values.estimator, journalEstimator(run.journal.header));
  const recipe = loadRecipe(values.recipe, loadMaterialLibrary(values.materials));
  const mismatch = designMismatch(recorded, recipe);
  if (mismatch !== undefined) throw new CliError(mismatch, 1);
  const strategy = estimator === 'plain' ? 'plain' : recipe.compensation?.enabled ? 'fit-compensated' : 'fit';
  if (strategy === 'fit-compensated' && !recipe.design.band) throw new CliError(`the recipe "${recipe.name}" compensates, and its design has no band to compensate over`, 1);
  if (values.plot !== undefined && !recorded.design.band) throw new CliError('--plot draws the final spectra over the design band, and this design has no band (band: {fromNm, toNm})', 1);

  // The calibration's run index of this run (pooled calibrations hold several).
  const runIndex = Math.max(0, calibration.runs?.findIndex((r) => resolve(r.dir) === resolve(run.dir)) ?? 0);
  const deposit: RecordedDeposit = {
    indexFactors: Object.fromEntries(Object.entries(calibration.materials).map(([name, m]) => [name, m.indexFactor])),
    layers: calibration.layers.filter((l) => (l.run ?? 0) === runIndex),
  };
  const factors = Object.fromEntries(Object.entries(calibration.materials).map(([name, m]) => [name, { chipRatio: m.chipRatio.value, toolingFactor: m.toolingFactor.value }]));
  const profile = rebaseProfile(calibration.profile, factors, recipe);

  io.err(`what-if: ${runs} run${runs === 1 ? '' : 's'} of "${recipe.name}" (${strategy}) on the chamber calibrated from ${run.journal.header.runId}`);
  const bar = createProgressBar();
  const report = await runWhatIf(recorded, deposit, recipe, profile, {
    runs,
    strategy,
    firstSeed,
    ...(workers !== undefined ? { workers } : {}),
    onProgress: (done, total) => bar.update(done / total, `${done}/${total} runs`),
  });
  bar.end();
  if (values.plot !== undefined) {
    writeOutputFile(values.plot, plotWhatIf(report, run.journal.header.runId));
    io.err(`wrote ${values.plot}`);
  }
  io.out(values.json ? JSON.stringify({ run: run.journal.header.runId, ...report, band: undefined }) : formatWhatIf(report, run.journal.header.runId));
  return 0;
}

function readCalibration(dir: string, target: string): z.infer<typeof CalibrationFileSchema> & { profile: SimProfile } {
  const file = join(dir, 'calibration.json');
  const again = `run \`fringe calibrate ${target} --measured PART.csv\` first`;
  if (!existsSync(file)) throw new CliError(`${target} has no calibration beside it (calibration.json): ${again}`, 1);
  let value: unknown;
  try {
    value = JSON.parse(readFileSync(file, 'utf8'));
  } catch {
    throw new CliError(`${file} is damaged (not JSON): ${again}`, 1);
  }
  const parsed = CalibrationFileSchema.safeParse(value);
  if (!parsed.success) throw new CliError(`${file} is not a calibration as fringe writes it: ${again}`, 1);
  if (parsed.data.profileProblem !== undefined) throw new CliError(`${file}: ${parsed.data.profileProblem}`, 1);
  if (parsed.data.profile === undefined) throw new CliError(`${file} was written before calibrations kept the chamber's profile: ${again}`, 1);
  const profile = SimProfileSchema.safeParse(parsed.data.profile);
  if (!profile.success) throw new CliError(`${file} holds a damaged chamber profile: ${again}`, 1);
  return { ...parsed.data, profile: profile.data };
}

function formatWhatIf(r: WhatIfReport, runId: string): string {
  const f = (x: number, digits = 3): string => (Number.isFinite(x) ? x.toFixed(digits) : '—');
  const rows = [
    `what-if "${r.recipe}" (${r.strategy}), ${r.runs} runs from seed ${r.firstSeed}, beside run ${runId} as calibrated${r.incomplete ? `; ${r.incomplete} runs incomplete` : ''}`,
    '',
    'n·d error, % of the design:',
    ' #  material   recorded ± sigma     what-if mean    rms     sd',
  ];
  for (const l of r.layers) {
    rows.push(
      `${String(l.number).padStart(2)}  ${l.material.padEnd(9)} ${f(l.recorded.opticalErrorPercent).padStart(8)} ± ${f(l.recorded.sigmaPercent).padEnd(8)} ${f(l.whatIf.meanPercent).padStart(12)} ${f(l.whatIf.rmsPercent).padStart(6)} ${f(l.whatIf.sdPercent).padStart(6)}`,
    );
  }
  const all = (pick: (l: WhatIfReport['layers'][number]) => number): number => Math.sqrt(r.layers.reduce((s, l) => s + pick(l) ** 2, 0) / Math.max(1, r.layers.length));
  rows.push(`all: recorded rms ${f(all((l) => l.recorded.opticalErrorPercent))} %, what-if rms ${f(all((l) => l.whatIf.rmsPercent))} %`);
  if (r.spectrum) {
    const s = r.spectrum;
    rows.push(
      '',
      'final spectrum against the design (largest |ΔT| over the band):',
      `  recorded ${f(100 * s.recorded.maxAbsT, 2)} pp${s.recorded.meetsTolerances === null ? '' : s.recorded.meetsTolerances ? ', meets every tolerance' : `, misses a tolerance (worst margin ${f(s.recorded.worstMarginPp ?? Number.NaN)} pp)`}`,
      `  what-if  mean ${f(100 * s.whatIf.meanMaxAbsT, 2)} pp, worst ${f(100 * s.whatIf.worstMaxAbsT, 2)} pp${
        s.whatIf.yieldPercent === null ? '' : `, yield ${f(s.whatIf.yieldPercent, 1)} % (95 % Wilson interval ${f(s.whatIf.yieldIntervalPercent?.low ?? Number.NaN, 1)}–${f(s.whatIf.yieldIntervalPercent?.high ?? Number.NaN, 1)} %)`
      }`,
    );
  }
  return rows.join('\n');
}

function plotWhatIf(r: WhatIfReport, runId: string): string {
  const band = r.band as NonNullable<WhatIfReport['band']>;
  const x = band.designT.map((_, i) => band.fromNm + i * band.stepNm);
  const at = (i: number): number[] => band.runsT.map((t) => t[i] ?? Number.NaN);
  return renderLineChart(
    [
      { label: 'design', x, y: band.designT },
      { label: `recorded run (calibrated)`, x, y: band.recordedT },
      { label: `what-if: lowest T of ${r.runs}`, x, y: x.map((_, i) => Math.min(...at(i))) },
      { label: `what-if: highest T of ${r.runs}`, x, y: x.map((_, i) => Math.max(...at(i))) },
    ],
    { title: `What-if "${r.recipe}" (${r.strategy}) beside run ${runId}`, xLabel: 'Wavelength (nm)', yLabel: 'T (%)', yPercent: true },
  );
}
