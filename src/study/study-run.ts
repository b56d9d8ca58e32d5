/**
 * One seeded simulated run of a recipe with a cut strategy, reduced to what the accuracy study
 * keeps: each layer's thickness error and the spectrum's deviation from the design.
 */
import { createVirtualChamber, trueOpticalErrorPercent, trueStackSpec, type SimProfile } from '../../sim/index.ts';
import { spectrumDeviation } from '../model/design/spectrum-deviation.ts';
import { checkTolerances } from '../model/design/tolerances.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { createController, type ControllerOptions } from '../pipeline/controller.ts';
import { runStepped } from '../pipeline/run-stepped.ts';

/**
 * Named cut strategies the study compares: controller settings, and whether to compensate. A
 * strategy means what its name says whatever the recipe's `compensation` block: the block gives
 * the compensated strategies their settings, and never turns compensation on or off.
 */
export const STRATEGIES: Readonly<Record<string, { controller: Partial<ControllerOptions>; compensate: boolean }>> = {
  /** The plain rules, as a careful operator applies them. */
  plain: { controller: {}, compensate: false },
  /** The plain rules without the re-plan after each layer. */
  'plain-no-replan': { controller: { replan: false }, compensate: false },
  /** The model fit of each optical layer's whole signal, on the crystal's clock. */
  fit: { controller: { estimator: 'fit' }, compensate: false },
  /** The fit, and after each layer the later layers re-optimised for the design's spectrum. */
  'fit-compensated': { controller: { estimator: 'fit' }, compensate: true },
};

export interface StudyRunResult {
  seed: number;
  strategy: string;
  complete: boolean;
  /**
   * (true − target) / target × 100, per layer: physical thickness on the parts, against the
   * target the layer was cut for (the design's; with compensation, as it moved it).
   */
  errorPercent: number[];
  /**
   * The same for the optical thickness n·d at the layer's monitor wavelength (true n and d
   * against the design's): what optical monitoring controls; index and chip-ratio errors
   * separate the two.
   */
  opticalErrorPercent: number[];
  cutReasons: string[];
  maxAbsT: number;
  meanAbsT: number;
  maxAbsR: number;
  meanAbsR: number;
  /** The deposited stack's T over the design band (2 nm steps from its start), for the spread plot. */
  depositedT: number[];
  /** Per design tolerance, the deposited stack's worst margin, percentage points (empty without tolerances). */
  toleranceMarginsPp: number[];
  /** The run finished and its stack meets every tolerance (the yield counts these). */
  meetsTolerances: boolean;
}

/** Why a strategy cannot run on a recipe, in one sentence, or undefined when it can. */
export function strategyProblem(recipe: ResolvedRecipe, strategy: string): string | undefined {
  const options = STRATEGIES[strategy];
  if (!options) return `unknown strategy "${strategy}"; the strategies are ${Object.keys(STRATEGIES).join(', ')}`;
  if (options.compensate && !recipe.design.band) {
    return `strategy "${strategy}" compensates against the design's spectrum over its band, and the design of "${recipe.name}" has no band (band: {fromNm, toNm})`;
  }
  return undefined;
}

/** The recipe as the strategy runs it: compensation on for the compensated strategies (with the recipe's settings), off for the rest. */
export function recipeForStrategy(recipe: ResolvedRecipe, strategy: string): ResolvedRecipe {
  const problem = strategyProblem(recipe, strategy);
  if (problem !== undefined) throw new Error(problem);
  const { compensation, ...rest } = recipe;
  if (!(STRATEGIES[strategy] as { compensate: boolean }).compensate) return rest;
  return { ...rest, compensation: { boundsPercent: 10, quantity: 'T', stepNm: 5, ...compensation, enabled: true } };
}

export function runOne(recipe: ResolvedRecipe, profile: SimProfile, strategy: string, seed: number): StudyRunResult {
  recipe = recipeForStrategy(recipe, strategy);
  const options = STRATEGIES[strategy] as (typeof STRATEGIES)[string];
  const chamber = createVirtualChamber(recipe, profile, seed);
  const cutReasons: string[] = recipe.layers.map(() => 'not-cut');
  const state = runStepped(createController(recipe, options.controller), chamber, {
    onEvent: (e) => {
      if (e.type === 'cut') cutReasons[e.layer - 1] = e.reason;
    },
  });
  const truth = chamber.truth();
  const targets = recipe.layers.map((l, i) => state.targetsNm[i] ?? l.targetNm);
  const errorPercent = targets.map((target, i) => (100 * ((truth.layers[i]?.partNm ?? 0) - target)) / target);
  const opticalErrorPercent = recipe.layers.map((l, i) => trueOpticalErrorPercent(l, truth.layers[i], targets[i] as number));
  let deviation: { maxAbsT: number; meanAbsT: number; maxAbsR: number; meanAbsR: number; deposited: { T: ArrayLike<number> } } = {
    maxAbsT: Number.NaN,
    meanAbsT: Number.NaN,
    maxAbsR: Number.NaN,
    meanAbsR: Number.NaN,
    deposited: { T: [] },
  };
  const band = recipe.design.band;
  const deposited = trueStackSpec(recipe, truth);
  if (band) deviation = spectrumDeviation(recipe.design.stack, deposited, band, { stepNm: 2 });
  const verdict = checkTolerances(deposited, recipe.design.tolerances);
  const complete = state.phase === 'finished';
  return {
    seed,
    strategy,
    complete,
    errorPercent,
    opticalErrorPercent,
    cutReasons,
    maxAbsT: deviation.maxAbsT,
    meanAbsT: deviation.meanAbsT,
    maxAbsR: deviation.maxAbsR,
    meanAbsR: deviation.meanAbsR,
    depositedT: Array.from(deviation.deposited.T),
    toleranceMarginsPp: verdict.results.map((r) => r.worstMarginPp),
    meetsTolerances: complete && verdict.pass,
  };
}
