/**
 * The what-if: a changed recipe or strategy run N times, with fresh noise, on the virtual chamber
 * a finished run's calibration describes, reported beside what the calibration says the run
 * itself deposited. The runs are the study's (`runStudy`: seeded, in worker threads); this module
 * only adds the recorded run's side and the comparison.
 */
import type { SimProfile } from '../../sim/index.ts';
import { spectrumDeviation } from '../model/design/spectrum-deviation.ts';
import { checkTolerances } from '../model/design/tolerances.ts';
import { scaledDispersion } from '../model/optics/dispersion.ts';
import type { StackSpec } from '../model/optics/optical-model.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { runStudy, type StudyReport } from './study.ts';

/** What the calibration says the recorded run deposited: per material the index factor, per layer the part thickness, with sigmas. */
export interface RecordedDeposit {
  readonly indexFactors: Readonly<Record<string, { value: number; sigma: number }>>;
  /** By layer number; a layer missing was never deposited. */
  readonly layers: readonly { number: number; partNm: number; sigmaNm: number }[];
}

export interface WhatIfLayer {
  number: number;
  material: string;
  /** The recorded run's n·d error (% of the design's) and its standard uncertainty, from the calibration; NaN where it has none. */
  recorded: { opticalErrorPercent: number; sigmaPercent: number };
  /** Over the what-if runs: the mean, rms and standard deviation of the n·d error, %. */
  whatIf: { meanPercent: number; rmsPercent: number; sdPercent: number };
}

export interface WhatIfReport {
  recipe: string;
  strategy: string;
  runs: number;
  firstSeed: number;
  incomplete: number;
  layers: WhatIfLayer[];
  spectrum: {
    /** Over the design band in 2 nm steps (the study's grid): the largest |ΔT| against the design. */
    recorded: { maxAbsT: number; meetsTolerances: boolean | null; worstMarginPp: number | null };
    whatIf: { meanMaxAbsT: number; worstMaxAbsT: number; yieldPercent: number | null; yieldIntervalPercent: { low: number; high: number } | null };
  } | null;
  /** For the plot: the design's T, the recorded run's and every what-if run's over the band (2 nm steps). */
  band: { fromNm: number; stepNm: number; designT: number[]; recordedT: number[]; runsT: number[][] } | null;
}

export interface WhatIfOptions {
  runs: number;
  strategy: string;
  firstSeed?: number;
  workers?: number;
  onProgress?: (done: number, total: number) => void;
}

/** Why `recipe` cannot stand in for the recorded one (another design), in one sentence, or undefined. */
export function designMismatch(recorded: ResolvedRecipe, recipe: ResolvedRecipe): string | undefined {
  const a = recorded.layers;
  const b = recipe.layers;
  if (a.length !== b.length) return `the recipe "${recipe.name}" has ${b.length} layers and the recorded run's design ${a.length}: a what-if changes the strategy, not the design`;
  for (let i = 0; i < a.length; i++) {
    const x = a[i] as ResolvedRecipe['layers'][number];
    const y = b[i] as ResolvedRecipe['layers'][number];
    if (x.materialName !== y.materialName || Math.abs(y.targetNm / x.targetNm - 1) > 1e-6) {
      return `the recipe "${recipe.name}" is for another design: its layer ${i + 1} is ${y.targetNm.toFixed(2)} nm of ${y.materialName}, the recorded run's ${x.targetNm.toFixed(2)} nm of ${x.materialName}`;
    }
  }
  return undefined;
}

/** The recorded run's deposited stack as calibrated: the design's media with the fitted indices and thicknesses. */
export function recordedStack(recorded: ResolvedRecipe, deposit: RecordedDeposit): StackSpec {
  const design = recorded.design.stack;
  return {
    ...design,
    layers: design.layers.map((l, i) => {
      const layer = recorded.layers[i] as ResolvedRecipe['layers'][number];
      const f = deposit.indexFactors[layer.materialName]?.value ?? 1;
      return { dispersion: scaledDispersion(l.dispersion, f, 0), thicknessNm: deposit.layers.find((x) => x.number === layer.number)?.partNm ?? 0 };
    }),
  };
}

export async function runWhatIf(recorded: ResolvedRecipe, deposit: RecordedDeposit, recipe: ResolvedRecipe, profile: SimProfile, options: WhatIfOptions): Promise<WhatIfReport> {
  const firstSeed = options.firstSeed ?? 1;
  const study: StudyReport = await runStudy(recipe, profile, {
    runs: options.runs,
    strategies: [options.strategy],
    firstSeed,
    ...(options.workers !== undefined ? { workers: options.workers } : {}),
    ...(options.onProgress ? { onProgress: options.onProgress } : {}),
  });
  const results = study.results;
  const stats = study.strategies[0] as StudyReport['strategies'][number];
  const layers = recipe.layers.map((layer, i): WhatIfLayer => {
    const errors = results.map((r) => r.opticalErrorPercent[i] as number);
    const mean = errors.reduce((s, e) => s + e, 0) / errors.length;
    const rms = Math.sqrt(errors.reduce((s, e) => s + e * e, 0) / errors.length);
    const sd = errors.length > 1 ? Math.sqrt(errors.reduce((s, e) => s + (e - mean) ** 2, 0) / (errors.length - 1)) : 0;
    const recordedLayer = recorded.layers[i] as ResolvedRecipe['layers'][number];
    const f = deposit.indexFactors[recordedLayer.materialName];
    const part = deposit.layers.find((x) => x.number === recordedLayer.number);
    // n·d against the design's: f·p/target (the film's index is f × the library's at every wavelength).
    const ratio = f && part ? (f.value * part.partNm) / recordedLayer.targetNm : Number.NaN;
    const sigma = f && part ? 100 * Math.hypot((f.value * part.sigmaNm) / recordedLayer.targetNm, (f.sigma * part.partNm) / recordedLayer.targetNm) : Number.NaN;
    return {
      number: layer.number,
      material: layer.materialName,
      recorded: { opticalErrorPercent: 100 * (ratio - 1), sigmaPercent: sigma },
      whatIf: { meanPercent: mean, rmsPercent: rms, sdPercent: sd },
    };
  });
  const band = recorded.design.band;
  let spectrum: WhatIfReport['spectrum'] = null;
  let bandOut: WhatIfReport['band'] = null;
  const stack = recordedStack(recorded, deposit);
  const tolerances = recorded.design.tolerances;
  const verdict = tolerances.length > 0 ? checkTolerances(stack, tolerances) : null;
  if (band && study.band) {
    const deviation = spectrumDeviation(recorded.design.stack, stack, band, { stepNm: study.band.stepNm });
    spectrum = {
      recorded: { maxAbsT: deviation.maxAbsT, meetsTolerances: verdict ? verdict.pass : null, worstMarginPp: verdict ? verdict.worstMarginPp : null },
      whatIf: {
        meanMaxAbsT: stats.spectrum.meanMaxAbsT,
        worstMaxAbsT: stats.spectrum.worstMaxAbsT,
        yieldPercent: stats.yieldPercent,
        yieldIntervalPercent: stats.yieldIntervalPercent ? { low: stats.yieldIntervalPercent.low, high: stats.yieldIntervalPercent.high } : null,
      },
    };
    bandOut = { fromNm: study.band.fromNm, stepNm: study.band.stepNm, designT: study.band.designT, recordedT: Array.from(deviation.deposited.T), runsT: results.map((r) => r.depositedT) };
  }
  return { recipe: recipe.name, strategy: options.strategy, runs: options.runs, firstSeed, incomplete: stats.incomplete, layers, spectrum, band: bandOut };
}
