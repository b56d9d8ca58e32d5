/**
 * The accuracy study: N seeded simulated runs per strategy, spread over worker threads, reduced
 * to per-layer RMS and worst thickness errors beside the plan's predicted precision, and the
 * final spectrum's deviation from the design.
 */
import { availableParallelism } from 'node:os';
import { Worker } from 'node:worker_threads';
import type { SimProfile } from '../../sim/index.ts';
import { spectrumDeviation } from '../model/design/spectrum-deviation.ts';
import { describeTolerance, wilsonInterval } from '../model/design/tolerances.ts';
import { planRun } from '../model/plan/plan.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { strategyProblem, type StudyRunResult } from './study-run.ts';

export interface StudyOptions {
  runs: number;
  strategies: readonly string[];
  /** First seed (default 1): runs use seeds first … first + runs − 1, the same for every strategy. */
  firstSeed?: number;
  /** Worker threads (default: the machine's parallelism). */
  workers?: number;
  onProgress?: (done: number, total: number) => void;
}

export interface LayerStatistics {
  number: number;
  material: string;
  cut: string;
  rmsPercent: number;
  worstPercent: number;
  meanPercent: number;
  /** RMS and worst error of the optical thickness n·d at the monitor wavelength, %. */
  opticalRmsPercent: number;
  opticalWorstPercent: number;
  /** The plan's expected precision for the layer, % (the optical fit's bound, or the crystal's). */
  plannedPercent: number;
  /** The same with the layers below as uncertain as their own bounds (the plan's stack figure), %. */
  plannedStackPercent: number;
}

export interface StrategyStatistics {
  strategy: string;
  runs: number;
  incomplete: number;
  layers: LayerStatistics[];
  rmsPercent: number;
  worstPercent: number;
  opticalRmsPercent: number;
  /** The same over the layers of each cut mode (the plan's): physical and optical RMS, %. */
  byCut: Record<string, { layers: number; rmsPercent: number; opticalRmsPercent: number }>;
  spectrum: { meanMaxAbsT: number; worstMaxAbsT: number; meanMeanAbsT: number };
  /**
   * Percentage of the runs that finished with a stack meeting every tolerance of the design
   * (null when the design has none); an unfinished run counts as failed.
   */
  yieldPercent: number | null;
  /** The yield's binomial 95 % interval (Wilson score; see `wilsonInterval`), %. */
  yieldIntervalPercent: { low: number; high: number; method: 'Wilson score, 95 %' } | null;
  /** Per design tolerance: the worst margin over the runs (pp, negative when missed) and the share of runs meeting it, %. */
  tolerances: { tolerance: string; worstMarginPp: number; meetPercent: number }[];
}

export interface StudyReport {
  recipe: string;
  runs: number;
  /** The recipe's compensation settings, which the compensated strategies use (absent: the defaults). */
  compensation?: NonNullable<ResolvedRecipe['compensation']>;
  /** The design's T over its band (2 nm steps), beside each run's `depositedT`. */
  band: { fromNm: number; stepNm: number; designT: number[] } | null;
  strategies: StrategyStatistics[];
  results: StudyRunResult[];
}

export async function runStudy(recipe: ResolvedRecipe, profile: SimProfile, options: StudyOptions): Promise<StudyReport> {
  for (const s of options.strategies) {
    const problem = strategyProblem(recipe, s);
    if (problem !== undefined) throw new Error(problem);
  }
  const first = options.firstSeed ?? 1;
  const tasks = options.strategies.flatMap((strategy) => Array.from({ length: options.runs }, (_, i) => ({ strategy, seed: first + i })));
  const workers = Math.max(1, Math.min(options.workers ?? availableParallelism(), tasks.length));
  const shares = Array.from({ length: workers }, (_, w) => tasks.filter((_, i) => i % workers === w));
  const results: StudyRunResult[] = [];
  await Promise.all(
    shares.map(
      (share) =>
        new Promise<void>((resolve, reject) => {
          const worker = new Worker(new URL('./study-worker.js', import.meta.url), { workerData: { recipe, profile, tasks: share } });
          worker.on('message', (message: { ok: true; result: StudyRunResult } | { ok: false; message: string }) => {
            if (!message.ok) {
              reject(new Error(message.message));
              void worker.terminate();
              return;
            }
            results.push(message.result);
            options.onProgress?.(results.length, tasks.length);
          });
          worker.once('error', reject);
          worker.once('exit', (code) => (code === 0 ? resolve() : reject(new Error(`a study worker ended with code ${code}`))));
        }),
    ),
  );
  results.sort((a, b) => a.strategy.localeCompare(b.strategy) || a.seed - b.seed);
  const plan = planRun(recipe, { suggest: 'none' });
  const band = recipe.design.band;
  return {
    recipe: recipe.name,
    runs: options.runs,
    ...(recipe.compensation ? { compensation: recipe.compensation } : {}),
    band: band
      ? { fromNm: band.fromNm, stepNm: 2, designT: Array.from(spectrumDeviation(recipe.design.stack, recipe.design.stack, band, { stepNm: 2 }).design.T) }
      : null,
    strategies: options.strategies.map((strategy) => summarise(recipe, plan.layers, strategy, results.filter((r) => r.strategy === strategy))),
    results,
  };
}

function summarise(
  recipe: ResolvedRecipe,
  planLayers: ReturnType<typeof planRun>['layers'],
  strategy: string,
  runs: StudyRunResult[],
): StrategyStatistics {
  const layers = recipe.layers.map((layer, i): LayerStatistics => {
    const errors = runs.map((r) => r.errorPercent[i] as number);
    const optical = runs.map((r) => r.opticalErrorPercent[i] as number);
    return {
      opticalRmsPercent: rms(optical),
      opticalWorstPercent: Math.max(...optical.map(Math.abs)),
      number: layer.number,
      material: layer.materialName,
      cut: planLayers[i]?.cut ?? 'time',
      rmsPercent: rms(errors),
      worstPercent: Math.max(...errors.map(Math.abs)),
      meanPercent: errors.reduce((s, e) => s + e, 0) / Math.max(1, errors.length),
      plannedPercent: planLayers[i]?.precisionPercent ?? Number.NaN,
      plannedStackPercent: planLayers[i]?.stackPrecisionPercent ?? Number.NaN,
    };
  });
  const all = runs.flatMap((r) => r.errorPercent);
  const tolerances = recipe.design.tolerances;
  const met = runs.filter((r) => r.meetsTolerances).length;
  const interval = wilsonInterval(met, runs.length);
  const maxT = runs.map((r) => r.maxAbsT);
  return {
    strategy,
    runs: runs.length,
    incomplete: runs.filter((r) => !r.complete).length,
    layers,
    rmsPercent: rms(all),
    worstPercent: Math.max(...all.map(Math.abs)),
    opticalRmsPercent: rms(runs.flatMap((r) => r.opticalErrorPercent)),
    byCut: Object.fromEntries(
      [...new Set(layers.map((l) => l.cut))].map((cut) => {
        const indices = layers.flatMap((l, i) => (l.cut === cut ? [i] : []));
        return [
          cut,
          {
            layers: indices.length,
            rmsPercent: rms(runs.flatMap((r) => indices.map((i) => r.errorPercent[i] as number))),
            opticalRmsPercent: rms(runs.flatMap((r) => indices.map((i) => r.opticalErrorPercent[i] as number))),
          },
        ];
      }),
    ),
    spectrum: {
      meanMaxAbsT: maxT.reduce((s, x) => s + x, 0) / Math.max(1, maxT.length),
      worstMaxAbsT: Math.max(...maxT),
      meanMeanAbsT: runs.reduce((s, r) => s + r.meanAbsT, 0) / Math.max(1, runs.length),
    },
    yieldPercent: tolerances.length > 0 && runs.length > 0 ? (100 * met) / runs.length : null,
    yieldIntervalPercent:
      tolerances.length > 0 && runs.length > 0 ? { low: 100 * interval.low, high: 100 * interval.high, method: 'Wilson score, 95 %' } : null,
    tolerances: tolerances.map((t, k) => ({
      tolerance: describeTolerance(t),
      worstMarginPp: Math.min(...runs.map((r) => r.toleranceMarginsPp[k] ?? Number.NEGATIVE_INFINITY)),
      meetPercent: (100 * runs.filter((r) => r.complete && (r.toleranceMarginsPp[k] ?? -1) >= 0).length) / Math.max(1, runs.length),
    })),
  };
}

function rms(values: readonly number[]): number {
  return Math.sqrt(values.reduce((s, v) => s + v * v, 0) / Math.max(1, values.length));
}
