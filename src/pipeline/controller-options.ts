/** The controller's options, with their defaults, and what every part of it is built with. */
import { DEFAULT_INDEX_SIGMA } from '../model/plan/stack-precision.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';

export interface ControllerOptions {
  /** Consecutive readings beyond the trigger level before a level cut (default 3). */
  debounceReadings: number;
  /**
   * A turn is confirmed when the signal comes back from its extremum by a tenth of the layer's
   * planned swing, kept between `confirmMinSigma`·σ and `confirmSigma`·σ (defaults 2 and 5): small
   * swings need a small step, noise needs a large one (common practice, no source).
   */
  confirmSigma: number;
  confirmMinSigma: number;
  /**
   * The turn detector watches the signal through an exponential average of this time constant
   * (default 1 s; σ falls about 4× at 10 Hz), so that noise does not make turns; it lags by as much.
   */
  turnSmoothingS: number;
  /** A channel silent for this long is lost (default 2 s). */
  staleAfterS: number;
  /**
   * An optical cut is armed only once the crystal (or the clock) says this fraction of the target
   * has grown (default 0.7): a careful operator never cuts a layer at a fifth of its thickness
   * because the signal met its level on the wrong branch.
   */
  armFraction: number;
  /** Force a cut above this multiple of the target thickness (default 1.3). */
  thicknessCeiling: number;
  /** Force a cut after this multiple of the planned duration (default 1.6). */
  timeCeiling: number;
  /** Announce the cut this long before it is expected (default 10 s). */
  approachingS: number;
  /** Time constant of the crystal rate estimate (default 5 s). */
  rateSmoothingS: number;
  /** After the shutter delay, wait this long before the layer counts as finished (default 1 s). */
  settleS: number;
  /** Re-plan the remaining layers after every layer (default true). */
  replan: boolean;
  /**
   * How optical layers are cut: `plain` (the plain rules, src/pipeline/rules/) or `fit` (the model
   * fit of the whole layer's signal, src/pipeline/estimators/model-fit.ts, on the crystal's
   * thickness as its clock, cutting when the fitted thickness plus the shutter delay's growth
   * reaches the target). Default `plain` here,
   * the reducer's baseline; the command line's default is `fit`.
   */
  estimator: 'plain' | 'fit';
  /**
   * With the fit: prior rms of a layer's index against the design's (fraction; default 0.03, a
   * few per cent being how far evaporated films stray, common practice, no source); 0 fits no
   * index. The fitted index goes to the chip model of the later layers.
   */
  indexSigma: number;
  /** With the fit: after each layer, refit the chip's layers together (default true). */
  chipRefit: boolean;
  /**
   * Every close counts as unconfirmed until its `shutter-ack` arrives (default false: only a
   * close the shutter output reports failing does). A live run sets it: its shutter output
   * confirms every command; an in-process chamber or a test need not.
   */
  confirmCloses: boolean;
  /**
   * A reading whose time lies further than this from the run clock's present is a `time-jump`
   * fault (default 5 s: readings come several times a second, and silence is ticked through).
   */
  timeJumpS: number;
  /** A monitor that went quiet takes its layer back after answering this long again (default 1 s). */
  recoverS: number;
}

export const DEFAULT_CONTROLLER_OPTIONS: ControllerOptions = {
  debounceReadings: 3,
  confirmSigma: 5,
  confirmMinSigma: 2,
  turnSmoothingS: 1,
  armFraction: 0.7,
  staleAfterS: 2,
  thicknessCeiling: 1.3,
  timeCeiling: 1.6,
  approachingS: 10,
  rateSmoothingS: 5,
  settleS: 1,
  replan: true,
  estimator: 'plain',
  indexSigma: DEFAULT_INDEX_SIGMA,
  chipRefit: true,
  confirmCloses: false,
  timeJumpS: 5,
  recoverS: 1,
};

/** What the controller's parts are built with: the recipe, the options, and the monitor's noise. */
export interface ControllerContext {
  readonly recipe: ResolvedRecipe;
  readonly opts: ControllerOptions;
  /** rms of one optical reading (fraction of full scale). */
  readonly noise: number;
}
