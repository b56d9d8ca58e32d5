/**
 * The layer controller: a pure reducer `step(state, input) → { state, events }`. It decides when
 * each layer is cut from the readings' own times, never the wall clock, so a live run, a replay
 * and a simulation decide identically. The plain rules here are the baselines a careful
 * operator applies by eye:
 *
 * - `level`: after the planned number of turning points, cut when the signal has been beyond the
 *   plan's trigger level (which allows for the shutter delay) for `debounceReadings` readings;
 * - `turning-point`: cut when the extremum at the target is confirmed (the signal has come back
 *   by `confirmSigma`·σ), plus an overshoot as a fraction of the swing;
 * - `crystal`: cut when the crystal's tooling-corrected thickness plus rate × delay reaches the target;
 * - `time`: cut when the planned time less the shutter delay has passed.
 *
 * Guard rails force a cut at a thickness or time ceiling; a silent monitor hands the layer to the
 * crystal, a silent crystal to the clock, each with an alert, and a monitor that answers again
 * takes its layer back. Readings must be plausible before they are used: a timestamp more than
 * `timeJumpS` from the run clock's present, a crystal frequency no deposition rate can reach
 * from the last one, an optical value no chip can show are faults; several in a row are the
 * instrument's: a clock re-based, a fresh crystal bridged, or the instrument set aside for the
 * layer (see {@link SUSPECT_READINGS}).
 *
 * Shutters: a close that has not been confirmed (acknowledged, or written where the chamber
 * acknowledges nothing; with `confirmCloses`, every close until then; without, a close the shutter
 * output reported failing) keeps the next layer from opening and the run from completing: the
 * controller waits (`awaiting-close`) and alerts, and goes on when the confirmation comes or the
 * operator, having checked the shutter by hand, resumes.
 */
import { scaledDispersion } from '../model/optics/dispersion.ts';
import { sauerbreySensitivity, stackThicknessNm, type CrystalLayer } from '../model/crystal/index.ts';
import { compensate } from '../model/design/compensate.ts';
import { buildIndexTables, createLayerFit, layerSignalTable, refitChip, type LayerFit, type RefitLayer, type RefitLayerResult } from '../model/estimate/index.ts';
import { chipMonitorFor, planRun, type LayerPlan, type RunPlan } from '../model/plan/plan.ts';
import { DEFAULT_INDEX_SIGMA, INDEX_RUN_SIGMA } from '../model/plan/stack-precision.ts';
import { DEFAULT_PRIORS } from '../model/plan/precision.ts';
import type { CutMode, ResolvedRecipe } from '../model/plan/recipe.ts';
import { ALERTS, type AlertCode } from './codes.ts';
import type { CutReason, RunEvent } from './events.ts';
import type { FaultCode, LinkChange, OperatorCommand, PipelineInput, Reading, ShutterAck, ShutterCommand, ShutterFault } from './types.ts';

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
   * How optical layers are cut: `plain` (the rules above) or `fit` (the model fit of the whole
   * layer's signal, src/model/estimate, on the crystal's thickness as its clock, cutting when the
   * fitted thickness plus the shutter delay's growth reaches the target). Default `plain` here,
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

/**
 * Implausible readings in a row, on one channel, that are the instrument's and not a line's
 * (half a second at 10 Hz): a clock that jumped and stays, a crystal changed, or an instrument
 * set aside for the layer.
 */
const SUSPECT_READINGS = 5;
/**
 * A crystal reading may fall from the last one by what this many times the planned (or
 * measured, if higher) rate grows in between, plus {@link CRYSTAL_RISE_HZ}: sources can spit and
 * rates wander by tens of per cent, never tenfold in a tenth of a second (common practice, no source).
 */
const CRYSTAL_RATE_FACTOR = 10;
/**
 * A crystal reading may rise from the last one by 10 × its noise plus this much (heat from an
 * opened source moves a crystal by a few hertz over tens of seconds; config/sim/typical.yaml 3 Hz,
 * harsh 15 Hz with a 30 s time constant: a fraction of a hertz a reading).
 */
const CRYSTAL_RISE_HZ = 5;
/**
 * A fresh crystal reads within this fraction of the recipe's bare frequency (6 MHz crystals are
 * sold within a few kHz of it; from memory, allowed 30 kHz).
 */
const FRESH_CRYSTAL_BAND = 0.005;
/**
 * An optical reading may not jump from the last one by more than twice the layer's whole planned
 * curve range (0–120 % of the target) and 20σ: no chip does that in one reading. Any reading
 * must lie within half the full scale beyond 0..1 (no transmittance or reflectance does).
 */
const OPTICAL_JUMP_SIGMAS = 20;
/** Nor by less than a tenth of full scale: a monitor that noisy would be of no use at all. */
const OPTICAL_JUMP_FLOOR = 0.1;
const OPTICAL_SIGNAL_ALLOWANCE = 0.5;
/** After a fault's first alert, at most one summary of its code per this much run time, s. */
const FAULT_SUMMARY_S = 30;

/**
 * Layers refitted together: the last few on the chip, those below held at their estimates. The
 * refit's cost grows with the square of its layers; the readings of a layer tell mostly about
 * itself and the few below it (common practice, no source: 8 keeps a refit within tens of ms).
 */
const REFIT_LAYERS = 8;

/** Bins of a layer's readings kept for the chip refit: while it grew, and after the close. */
const RECORD_BINS = 60;
const RECORD_BINS_AFTER = 6;

/**
 * A layer's readings on the crystal's clock as bin means (spikes left out), each with its count
 * as its weight: over a bin of a few seconds the signal is straight to far below the noise, so
 * the means keep nearly all the information at a hundredth of the cost.
 */
function binnedRecord(fit: LayerFit, index: number, closeClock: number): RefitLayer | null {
  const { times, values, spikes } = fit.readings();
  const before: number[] = [];
  const after: number[] = [];
  for (let i = 0; i < times.length; i++) {
    if (spikes[i] !== 0 || !Number.isFinite(times[i])) continue;
    ((times[i] as number) < closeClock ? before : after).push(i);
  }
  if (before.length < 8) return null;
  const clocks: number[] = [];
  const means: number[] = [];
  const weights: number[] = [];
  for (const [group, bins] of [[before, RECORD_BINS], [after, RECORD_BINS_AFTER]] as const) {
    const count = Math.min(bins, group.length);
    for (let b = 0; b < count; b++) {
      const from = Math.floor((b * group.length) / count);
      const to = Math.floor(((b + 1) * group.length) / count);
      let clock = 0;
      let value = 0;
      for (let k = from; k < to; k++) {
        clock += times[group[k] as number] as number;
        value += values[group[k] as number] as number;
      }
      clocks.push(clock / (to - from));
      means.push(value / (to - from));
      weights.push(to - from);
    }
  }
  return { index, clocks: Float64Array.from(clocks), values: Float64Array.from(means), weights: Float64Array.from(weights), closeClock };
}

/** Half-width of the index difference behind the fit's index tables (signal-table.ts). */
const INDEX_DELTA = 0.01;
/**
 * How far a material's rate scale on the crystal's clock may move between its layers in one run,
 * rms (tooling and vapour distribution hold within a run as the index does, INDEX_RUN_SIGMA;
 * common practice, no source).
 */
const RATE_RUN_SIGMA = 0.003;
/** A material's rate on the crystal's clock known this well (fraction, rms) stands for the thickness of each of its layers (resolvedStack). */
const CALIBRATED_RATE_SIGMA = 0.005;
/**
 * Prior rms of the chip thickness when the crystal's clock starts, nm: the crystal and the chip
 * start growing at the same shutter opening, so it is the crystal's noise and heat shift, a tenth
 * of a nanometre or so (derived from config/sim/typical.yaml's 0.05 Hz and 3 Hz; allowed 0.5).
 */
const CLOCK_START_SIGMA_NM = 0.5;

/** `awaiting-close`: a layer has ended and the next (or the run's end) waits for a shutter's close to be confirmed. */
export type Phase = 'ready' | 'depositing' | 'closing' | 'holding' | 'awaiting-close' | 'finished' | 'aborted';

interface OpticalTrack {
  readonly lastS: number;
  readonly value: number;
  /** The signal through the turn detector's exponential average. */
  readonly smoothed: number;
  /** Running extremum (of the smoothed signal) in the current trend. */
  readonly extreme: number;
  readonly trend: 1 | -1;
  readonly turnsPassed: number;
  /** Signal step that confirms a turn. */
  readonly confirm: number;
  /** Turns the detector must see before the cut (see {@link visibleTurns}). */
  readonly turnsNeeded: number;
  /** Consecutive readings beyond the trigger level. */
  readonly beyond: number;
  /** Start of the present unbroken run of readings (gaps under staleAfterS), and where the gap before it began. */
  readonly since: number;
  readonly gapFromS: number;
  /** Twice the range of the layer's planned curve: a jump beyond it (and 20σ) is implausible. */
  readonly jumpLimit: number;
  /**
   * Consecutive implausible readings, the last of them, and whether they jumped among themselves
   * too; at SUSPECT_READINGS, readings that agree are the signal's new level, erratic ones set the
   * monitor aside for the layer.
   */
  readonly suspects: number;
  readonly suspectValue: number;
  readonly erratic: boolean;
  readonly distrusted: boolean;
}

interface CrystalTrack {
  readonly lastS: number;
  readonly frequencyHz: number;
  /** This layer's thickness on the parts from the crystal, nm (NaN before the first reading). */
  readonly partNm: number;
  readonly rateNmPerS: number;
  /** Start of the present unbroken run of accepted readings. */
  readonly since: number;
  /** Implausible readings in a row, or null. */
  readonly suspect: CrystalSuspect | null;
  /** The layer for which the crystal is set aside (its readings jumped as no deposition can), or −1. */
  readonly distrustLayer: number;
}

interface CrystalSuspect {
  readonly count: number;
  readonly firstHz: number;
  readonly firstS: number;
  readonly lastHz: number;
  readonly lastS: number;
  /** Every one of them a rise to near a fresh crystal's frequency. */
  readonly fresh: boolean;
}

/**
 * The crystal in use: its bare frequency and the layers on it. A fresh crystal mid-run starts a
 * new one: the finished layers' records (crystalBelow) stay, the crystal's own stack restarts
 * empty, and the layer growing at the change carries what it had grown on the old one.
 */
interface CrystalUnit {
  readonly referenceHz: number;
  readonly stack: readonly CrystalLayer[];
  /** The layer growing when this crystal came into use (−1 for the first), and its crystal nm until then. */
  readonly layer: number;
  readonly carriedNm: number;
}

/**
 * A channel's clock: the offset it was re-based by, and the time-jumped readings in a row (the
 * last one's time, the first one's and the run clock's present when it came).
 */
interface ChannelClock {
  readonly offsetS: number;
  readonly streak: number;
  readonly lastS: number;
  readonly firstS: number;
  readonly presentS: number;
}

/** What the alerts have said of a fault code: how many they counted, when the last went out, since when more came. */
interface FaultReport {
  readonly reported: number;
  readonly alertedS: number;
  readonly sinceS: number;
}

export interface ControllerState {
  readonly phase: Phase;
  readonly phaseBeforeHold: Phase;
  /** 0-based index of the current layer. */
  readonly index: number;
  readonly plan: RunPlan;
  readonly nowS: number;
  readonly openedAtS: number;
  readonly cutAtS: number;
  readonly mode: CutMode;
  readonly optical: OpticalTrack;
  readonly crystal: CrystalTrack;
  /** Crystal thickness of each finished layer as the crystal saw it, nm (whichever crystals it grew on). */
  readonly crystalBelow: readonly CrystalLayer[];
  readonly crystalUnit: CrystalUnit;
  /** Each channel's clock offset (an instrument whose clock jumped, re-based). */
  readonly clocks: { readonly optical: ChannelClock; readonly crystal: ChannelClock };
  /** Estimated part thickness of each finished layer, nm. */
  readonly achievedNm: readonly number[];
  /**
   * Estimated n_true / n_design of each finished layer: the fit's; NaN where the layer was not
   * fitted (cut on the crystal, say), whose index is then its material's as estimated so far.
   */
  readonly indexFactors: readonly number[];
  /**
   * For a layer not cut by the fit but watched by it (cut on the crystal): the optical thickness
   * the fit saw, as part nm at the design index; NaN otherwise. Stands for the layer's optical
   * thickness until its material's rate on the crystal's clock is known (see resolvedStack).
   */
  readonly opticalNm: readonly number[];
  /** Each material's index over the design's as its fitted layers so far showed it, with its rms. */
  readonly materialIndex: Readonly<Record<string, { readonly factor: number; readonly sigma: number }>>;
  /**
   * Each material's chip growth in u per second of the crystal clock over the planned chip rate,
   * with its rms, as its fitted layers showed it: the crystal's tooling, the chip ratio and the
   * index in one figure, the same for every layer of the material.
   */
  readonly materialRate: Readonly<Record<string, { readonly factor: number; readonly sigma: number }>>;
  /** The current chip's last REFIT_LAYERS finished layers watched on the crystal's clock, binned, for the chip refit. */
  readonly chipRecords: readonly RefitLayer[];
  /**
   * The material estimates as each finished layer left them: the refit of a window of layers
   * starts from those its first layer found, which owe nothing to the window's own readings.
   */
  readonly materialAfter: readonly { readonly rate: ControllerState['materialRate']; readonly index: ControllerState['materialIndex'] }[];
  readonly approachingSent: boolean;
  readonly rateAlerted: boolean;
  readonly crystalAlerted: boolean;
  readonly openAlerts: readonly string[];
  readonly alertCount: number;
  /** Exact count of every fault code; the alerts report them, thinned (FAULT_SUMMARY_S). */
  readonly faults: Readonly<Partial<Record<FaultCode, number>>>;
  readonly faultReports: Readonly<Partial<Record<FaultCode, FaultReport>>>;
  /** When the next summary of faults not yet reported is due (Infinity: none waiting). */
  readonly faultsDueS: number;
  readonly lastOpticalS: number;
  readonly lastCrystalS: number;
  readonly layerCrystalNm: number;
  /**
   * The model fit of the layer in progress (estimator `fit`), or null. Its reading buffers are
   * appended to in place — the one mutable part of the state, owned by the layer: a run, a replay
   * and a simulation each make their own, and the reducer never branches on an old state.
   */
  readonly fit: FitRun | null;
  /** Part thickness every layer is to reach: the design's, or as compensation re-optimised them. */
  readonly targetsNm: readonly number[];
  /** Sources whose last close is not confirmed. */
  readonly unconfirmedCloses: readonly string[];
  /**
   * Awaiting a close: when the wait began; NaN once it has been alerted (after `settleS`, so that
   * a close sent a moment ago, as a skip's, is not an alarm) or when not waiting.
   */
  readonly awaitingSinceS: number;
  /** Instrument links lost and not yet back. */
  readonly linksDown: readonly string[];
  /** Run time the run was last taken up again after a stop (NaN: never): the crystal's next reading is a fresh start. */
  readonly resumedAtS: number;
}

interface FitRun {
  readonly fit: LayerFit;
  /** The fit's clock is the crystal's part thickness over the planned rate (s), or elapsed time. */
  readonly clock: 'crystal' | 'time';
}

export interface StepResult {
  readonly state: ControllerState;
  readonly events: readonly RunEvent[];
}

const NO_EVENTS: readonly RunEvent[] = Object.freeze([]);

export interface Controller {
  readonly recipe: ResolvedRecipe;
  readonly options: ControllerOptions;
  initial(plan?: RunPlan): ControllerState;
  step(state: ControllerState, input: PipelineInput): StepResult;
}

export function createController(recipe: ResolvedRecipe, options: Partial<ControllerOptions> = {}): Controller {
  const opts: ControllerOptions = { ...DEFAULT_CONTROLLER_OPTIONS, ...options };
  const noise = recipe.monitor.noisePercent / 100;
  const f0 = recipe.crystal.bareFrequencyHz;
  const compensation = recipe.compensation?.enabled ? recipe.compensation : undefined;

  /** A tenth of the planned swing, kept between confirmMinSigma·σ and confirmSigma·σ. */
  const confirmStep = (plan: LayerPlan | undefined): number =>
    Math.min(opts.confirmSigma * noise, Math.max(opts.confirmMinSigma * noise, 0.1 * (plan?.swing ?? 0)));
  const layerPlan = (s: ControllerState): LayerPlan => s.plan.layers[s.index - (s.plan.fromLayer - 1)] as LayerPlan;
  const layerRecipe = (s: ControllerState) => recipe.layers[s.index] as ResolvedRecipe['layers'][number];

  function initial(plan: RunPlan = planRun(recipe, { suggest: 'none' })): ControllerState {
    return {
      phase: 'ready',
      phaseBeforeHold: 'ready',
      index: 0,
      plan,
      nowS: Number.NEGATIVE_INFINITY,
      openedAtS: Number.NaN,
      cutAtS: Number.NaN,
      mode: plan.layers[0]?.cut ?? 'time',
      optical: freshOptical(plan.layers[0], confirmStep(plan.layers[0])),
      crystal: { lastS: Number.NaN, frequencyHz: Number.NaN, partNm: Number.NaN, rateNmPerS: Number.NaN, since: Number.NaN, suspect: null, distrustLayer: -1 },
      crystalBelow: [],
      crystalUnit: { referenceHz: f0, stack: [], layer: -1, carriedNm: 0 },
      clocks: { optical: STEADY_CLOCK, crystal: STEADY_CLOCK },
      achievedNm: [],
      indexFactors: [],
      opticalNm: [],
      materialIndex: {},
      materialRate: {},
      chipRecords: [],
      materialAfter: [],
      approachingSent: false,
      rateAlerted: false,
      crystalAlerted: false,
      openAlerts: [],
      alertCount: 0,
      faults: {},
      faultReports: {},
      faultsDueS: Number.POSITIVE_INFINITY,
      lastOpticalS: Number.NaN,
      lastCrystalS: Number.NaN,
      layerCrystalNm: Number.NaN,
      fit: null,
      targetsNm: recipe.layers.map((l) => l.targetNm),
      unconfirmedCloses: [],
      awaitingSinceS: Number.NaN,
      linksDown: [],
      resumedAtS: Number.NaN,
    };
  }

  function step(state: ControllerState, input: PipelineInput): StepResult {
    const events: RunEvent[] = [];
    let s = state;
    switch (input.kind) {
      case 'fault':
        return { state: fault(s, events, input.code, input.line), events };
      case 'operator':
        return operator(s, input, events);
      case 'shutter-ack':
        return onShutterAck(s, input, events);
      case 'shutter-fault':
        return { state: onShutterFault(s, input, events), events };
      case 'link':
        return { state: onLink(s, input, events), events };
      case 'resumed':
        return { state: { ...s, resumedAtS: Number.isFinite(s.nowS) ? s.nowS : 0 }, events: NO_EVENTS };
      case 'tick':
        if (!(input.timeS >= s.nowS)) return { state: s, events: NO_EVENTS };
        s = withReading(s, input.timeS, s.lastOpticalS, s.lastCrystalS, s.optical, s.crystal, s.layerCrystalNm);
        break;
      case 'reading': {
        const clock = s.clocks[input.channel];
        let timeS = input.timeS - clock.offsetS;
        const lastOfChannel = input.channel === 'optical' ? s.lastOpticalS : s.lastCrystalS;
        if (Math.abs(timeS - s.nowS) > opts.timeJumpS && lastOfChannel <= s.resumedAtS) {
          // The instrument's clock ran on while the run was down: its first reading after the resume is the present.
          const jumpS = timeS - s.nowS;
          s = { ...s, clocks: { ...s.clocks, [input.channel]: { ...STEADY_CLOCK, offsetS: clock.offsetS + jumpS } } };
          timeS = input.timeS - s.clocks[input.channel].offsetS;
        } else if (Math.abs(timeS - s.nowS) > opts.timeJumpS && Number.isFinite(s.nowS)) {
          s = clockJump(s, events, input, timeS);
          if (s.clocks[input.channel].streak !== 0) return { state: s, events };
          timeS = input.timeS - s.clocks[input.channel].offsetS;
        } else if (clock.streak !== 0) {
          s = { ...s, clocks: { ...s.clocks, [input.channel]: { ...STEADY_CLOCK, offsetS: clock.offsetS } } };
        }
        if (timeS < s.nowS) return { state: fault(s, events, 'time-backwards', `${input.channel} at ${input.timeS} s`), events };
        if (!Number.isFinite(input.value)) return { state: fault(s, events, 'not-a-number', `${input.channel} ${input.value}`), events };
        const reading = timeS === input.timeS ? input : { ...input, timeS };
        s = reading.channel === 'optical' ? onOptical(s, reading, events) : onCrystal(s, reading, events);
        break;
      }
    }
    s = advance(s, events);
    return { state: s, events: events.length === 0 ? NO_EVENTS : events };
  }

  /**
   * Counts a fault. The first of its code raises its alert; later ones wait for a summary at
   * most every FAULT_SUMMARY_S of run time (advance sends it), so that a flood shows with its
   * numbers without flooding the alerts.
   */
  function fault(s: ControllerState, events: RunEvent[], code: FaultCode, line: string): ControllerState {
    const count = (s.faults[code] ?? 0) + 1;
    const faults = { ...s.faults, [code]: count };
    const nowS = Number.isFinite(s.nowS) ? s.nowS : 0;
    const report = s.faultReports[code];
    if (!report) {
      s = { ...s, faults, faultReports: { ...s.faultReports, [code]: { reported: count, alertedS: nowS, sinceS: Number.NaN } } };
      return alert(s, events, `fault-${code}`, `${ALERTS[`fault-${code}`].sentence} (${line.slice(0, 60)})`);
    }
    const waiting = report.reported < count - 1;
    const next = waiting ? report : { reported: report.reported, alertedS: report.alertedS, sinceS: nowS };
    return { ...s, faults, faultReports: { ...s.faultReports, [code]: next }, faultsDueS: Math.min(s.faultsDueS, report.alertedS + FAULT_SUMMARY_S) };
  }

  /** The faults counted since their code's last alert, one summary alert a code. */
  function reportFaults(s: ControllerState, events: RunEvent[]): ControllerState {
    const faultReports = { ...s.faultReports };
    for (const [code, report] of Object.entries(s.faultReports) as [FaultCode, FaultReport][]) {
      const count = s.faults[code] ?? 0;
      if (report.reported >= count) continue;
      const more = count - report.reported;
      s = alert(s, events, `fault-${code}`, `${more} more ${more === 1 ? 'line' : 'lines'} not used since ${report.sinceS.toFixed(1)} s (${count} in all): ${ALERTS[`fault-${code}`].sentence}`);
      faultReports[code] = { reported: count, alertedS: s.nowS, sinceS: Number.NaN };
    }
    return { ...s, faultReports, faultsDueS: Number.POSITIVE_INFINITY };
  }

  /**
   * A reading more than timeJumpS from the run clock's present is not used and does not move
   * the clock. SUSPECT_READINGS in a row on one channel, each a sane step from the last, mean its
   * instrument's clock jumped (restarted, or reset): the channel is re-based, its readings from
   * then on placed on the run clock from its present (a run clock that jumped would put every
   * other channel out of date, and time-cut layers off by the jump).
   */
  function clockJump(s: ControllerState, events: RunEvent[], r: Reading, timeS: number): ControllerState {
    const clock = s.clocks[r.channel];
    const steady = clock.streak > 0 && timeS >= clock.lastS && timeS - clock.lastS <= opts.timeJumpS;
    const first = steady ? { firstS: clock.firstS, presentS: clock.presentS } : { firstS: timeS, presentS: s.nowS };
    const streak = steady ? clock.streak + 1 : 1;
    if (streak < SUSPECT_READINGS) {
      s = { ...s, clocks: { ...s.clocks, [r.channel]: { offsetS: clock.offsetS, streak, lastS: timeS, ...first } } };
      return fault(s, events, 'time-jump', `${r.channel} at ${r.timeS} s`);
    }
    // The streak's first reading came at the present of its arrival; this one as far after it.
    const jumpS = timeS - Math.max(s.nowS, first.presentS + (timeS - first.firstS));
    s = { ...s, clocks: { ...s.clocks, [r.channel]: { ...STEADY_CLOCK, offsetS: clock.offsetS + jumpS } } };
    return alert(s, events, 'clock-rebased', `${ALERTS['clock-rebased'].sentence} (${r.channel}, ${jumpS >= 0 ? '+' : ''}${jumpS.toFixed(1)} s)`);
  }

  function onOptical(s: ControllerState, r: Reading, events: RunEvent[]): ControllerState {
    const o = s.optical;
    const growing = isGrowing(s);
    if (growing && o.distrusted) return withReading(s, r.timeS, s.lastOpticalS, s.lastCrystalS, o, s.crystal, s.layerCrystalNm);
    if (growing) {
      // Plausibility: no chip moves its signal by twice its layer's whole curve in one reading.
      // In a layer's first second, or the first after a gap, the last reading is no reference (a
      // monitor changing wavelength, a signal moving through the gap): a reading there only has
      // to be a signal at all. Five readings that agree take over from a wrong reference.
      const limit = Math.max(OPTICAL_JUMP_SIGMAS * noise, o.jumpLimit, OPTICAL_JUMP_FLOOR);
      const settled = r.timeS - o.since >= opts.recoverS;
      const noSignal = Math.abs(r.value - 0.5) > 0.5 + OPTICAL_SIGNAL_ALLOWANCE;
      if (noSignal || (settled && Math.abs(r.value - o.value) > limit)) {
        s = opticalSuspect(s, events, r, limit, noSignal);
        // Readings that agree among themselves are the signal's level (the reference was the wrong one).
        if (s.optical.suspects < SUSPECT_READINGS || s.optical.distrusted) return s;
      }
    }
    // Across a resume the fit's clock waits for the crystal's first reading: what grew meanwhile is in it.
    if (s.fit && growing && !(s.fit.clock === 'crystal' && s.crystal.lastS <= s.resumedAtS)) {
      s.fit.fit.add(fitClockAt(recipe, s, r.timeS), r.value);
      s.fit.fit.update();
    }
    if (s.phase !== 'depositing') return withReading(s, r.timeS, r.timeS, s.lastCrystalS, s.optical, s.crystal, s.layerCrystalNm);
    const plan = layerPlan(s);
    // A gap resets the run of readings the monitor needs before it takes its layer back.
    const lastS = Number.isNaN(s.lastOpticalS) ? s.openedAtS : Math.max(s.lastOpticalS, s.openedAtS);
    const unbroken = !Number.isNaN(o.since) && r.timeS - lastS < opts.staleAfterS;
    const confirm = o.confirm;
    const smoothed = Number.isNaN(o.smoothed) ? r.value : o.smoothed + (1 - Math.exp(-(r.timeS - o.lastS) / opts.turnSmoothingS)) * (r.value - o.smoothed);
    let { extreme, trend, turnsPassed } = o;
    if (Number.isNaN(extreme) || (trend > 0 ? smoothed > extreme : smoothed < extreme)) extreme = smoothed;
    else if (trend > 0 ? smoothed < extreme - confirm : smoothed > extreme + confirm) {
      turnsPassed++;
      trend = trend > 0 ? -1 : 1;
      extreme = smoothed;
    }
    const rising = plan.direction === 'rising' || (plan.direction === 'turning' && trend > 0);
    const isBeyond = rising ? r.value >= plan.triggerSignal : r.value <= plan.triggerSignal;
    const beyond = turnsPassed >= o.turnsNeeded && isBeyond ? o.beyond + 1 : 0;
    const optical: OpticalTrack = {
      lastS: r.timeS,
      value: r.value,
      smoothed,
      extreme,
      trend,
      turnsPassed,
      confirm: o.confirm,
      turnsNeeded: o.turnsNeeded,
      beyond,
      since: unbroken ? o.since : r.timeS,
      gapFromS: unbroken ? o.gapFromS : lastS,
      jumpLimit: o.jumpLimit,
      suspects: 0,
      suspectValue: Number.NaN,
      erratic: false,
      distrusted: false,
    };
    return withReading(s, r.timeS, r.timeS, s.lastCrystalS, optical, s.crystal, s.layerCrystalNm);
  }

  /**
   * An implausible optical reading: a fault, not used. The SUSPECT_READINGSth in a row is used if
   * they all agree and are signals at all (the caller goes on with it); else the monitor is set
   * aside for the layer.
   */
  function opticalSuspect(s: ControllerState, events: RunEvent[], r: Reading, limit: number, noSignal: boolean): ControllerState {
    const o = s.optical;
    const suspects = o.suspects + 1;
    const erratic = noSignal || (o.suspects > 0 && (o.erratic || Math.abs(r.value - o.suspectValue) > limit));
    if (suspects >= SUSPECT_READINGS && !erratic) return { ...s, optical: { ...o, suspects } };
    s = fault({ ...s, nowS: r.timeS }, events, 'implausible-jump', `optical ${r.value} at ${r.timeS} s`);
    if (s.phase !== 'depositing') return s;
    if (suspects < SUSPECT_READINGS) return { ...s, optical: { ...o, suspects, suspectValue: r.value, erratic } };
    s = { ...s, optical: { ...o, suspects: 0, suspectValue: Number.NaN, erratic: false, distrusted: true } };
    return alert(s, events, 'optical-implausible', ALERTS['optical-implausible'].sentence);
  }

  function onCrystal(s: ControllerState, r: Reading, events: RunEvent[]): ControllerState {
    let c = s.crystal;
    const inRun = isGrowing(s) || s.phase === 'holding';
    // The first reading after a resume may show all that grew while the run was down: no step to judge, no rate to take from it.
    const acrossResume = c.lastS <= s.resumedAtS;
    if (inRun && Number.isFinite(c.frequencyHz) && !acrossResume) {
      if (c.distrustLayer === s.index) return withReading(s, r.timeS, s.lastOpticalS, s.lastCrystalS, s.optical, c, s.layerCrystalNm);
      if (!crystalStepPlausible(s, c.frequencyHz, c.lastS, r.value, r.timeS)) {
        s = crystalSuspect(s, events, r);
        if (s.crystal.suspect !== null || s.crystal.distrustLayer === s.index) return s;
        // A fresh crystal, recognised: this reading is its first used.
        c = s.crystal;
      }
    }
    const since = Number.isNaN(c.since) || !(r.timeS - c.lastS < opts.staleAfterS) ? r.timeS : c.since;
    if (!isGrowing(s)) {
      const crystal = { lastS: r.timeS, frequencyHz: r.value, partNm: c.partNm, rateNmPerS: c.rateNmPerS, since, suspect: null, distrustLayer: c.distrustLayer };
      return withReading(s, r.timeS, s.lastOpticalS, r.timeS, s.optical, crystal, s.layerCrystalNm);
    }
    const layer = layerRecipe(s);
    if (Number.isNaN(s.crystalUnit.referenceHz)) s = crystalReference(s, r);
    const unit = s.crystalUnit;
    const onUnit = stackThicknessNm(unit.referenceHz, r.value, unit.stack, { densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio });
    // A reading above the frequency of the layers below (noise, warming) means no film yet.
    const crystalNm = (Number.isFinite(onUnit) ? onUnit : 0) + (unit.layer === s.index ? unit.carriedNm : 0);
    const partNm = crystalNm * layer.toolingFactor;
    let rate = c.rateNmPerS;
    if (Number.isFinite(c.partNm) && r.timeS > c.lastS && !acrossResume) {
      const instant = (partNm - c.partNm) / (r.timeS - c.lastS);
      const a = Math.min(1, (r.timeS - c.lastS) / opts.rateSmoothingS);
      rate = Number.isFinite(rate) ? rate + a * (instant - rate) : layer.rateNmPerS;
    }
    const crystal = { lastS: r.timeS, frequencyHz: r.value, partNm, rateNmPerS: rate, since, suspect: null, distrustLayer: c.distrustLayer };
    return withReading(s, r.timeS, s.lastOpticalS, r.timeS, s.optical, crystal, crystalNm);
  }

  /**
   * The crystal's stack is unknown (it did not see a whole layer): this reading is its reference,
   * as though a fresh crystal (the usual folding of the layers below into the reference, good to
   * the Z-match's correction of them), and what the layer grew before it is bridged at the
   * planned rate.
   */
  function crystalReference(s: ControllerState, r: Reading): ControllerState {
    const layer = layerRecipe(s);
    const closeS = Number.isFinite(s.cutAtS) ? s.cutAtS + layer.shutterDelayS : Number.POSITIVE_INFINITY;
    const carriedNm = (layer.rateNmPerS / layer.toolingFactor) * Math.max(0, Math.min(r.timeS, closeS) - s.openedAtS);
    return { ...s, crystalUnit: { referenceHz: r.value, stack: [], layer: s.index, carriedNm } };
  }

  /**
   * Whether a crystal can go from `fromHz` at `fromS` to `toHz` at `toS`: it falls by what the
   * film grows, at most CRYSTAL_RATE_FACTOR × the planned or measured rate (Sauerbrey at the
   * present frequency: the Z-match moves it by far less than that factor), and rises by no more
   * than noise and heat.
   */
  function crystalStepPlausible(s: ControllerState, fromHz: number, fromS: number, toHz: number, toS: number): boolean {
    const layer = layerRecipe(s);
    const slackHz = 10 * recipe.crystal.noiseHz + CRYSTAL_RISE_HZ;
    const change = toHz - fromHz;
    if (change > slackHz) return false;
    const measured = s.crystal.rateNmPerS;
    const partRate = Number.isFinite(measured) && measured > layer.rateNmPerS ? measured : layer.rateNmPerS;
    // Hz per crystal nm: C_f·ρ·(1 nm in cm) (Sauerbrey 1959, crystal.ts).
    const hzPerNm = sauerbreySensitivity(fromHz) * layer.densityGPerCm3 * 1e-7;
    const dtS = Number.isFinite(fromS) ? Math.max(0, toS - fromS) : 0;
    return -change <= hzPerNm * CRYSTAL_RATE_FACTOR * (partRate / layer.toolingFactor) * dtS + slackHz;
  }

  /**
   * An implausible crystal reading: a fault, not used. SUSPECT_READINGS in a row, each a
   * plausible step from the one before, are the instrument's: a rise to near a fresh crystal's
   * frequency is a crystal change (bridged), anything else sets the crystal aside for the layer
   * (it reads as silent: the fallbacks take over).
   */
  function crystalSuspect(s: ControllerState, events: RunEvent[], r: Reading): ControllerState {
    const c = s.crystal;
    const p = c.suspect;
    const fresh = Math.abs(r.value - f0) <= FRESH_CRYSTAL_BAND * f0 && r.value > c.frequencyHz;
    const steady = p !== null && crystalStepPlausible(s, p.lastHz, p.lastS, r.value, r.timeS);
    const suspect: CrystalSuspect = steady
      ? { count: p.count + 1, firstHz: p.firstHz, firstS: p.firstS, lastHz: r.value, lastS: r.timeS, fresh: p.fresh && fresh }
      : { count: 1, firstHz: r.value, firstS: r.timeS, lastHz: r.value, lastS: r.timeS, fresh };
    s = fault({ ...s, nowS: r.timeS }, events, 'implausible-jump', `crystal ${r.value} Hz at ${r.timeS} s`);
    if (suspect.count < SUSPECT_READINGS) return { ...s, crystal: { ...c, suspect } };
    if (suspect.fresh) return crystalChanged(s, events, suspect);
    s = { ...s, crystalAlerted: true, crystal: { ...c, suspect: null, distrustLayer: s.index } };
    return alert(s, events, 'crystal-implausible', ALERTS['crystal-implausible'].sentence);
  }

  /**
   * A fresh crystal came into use: it is the reference from its first reading on, its stack
   * empty; the layer growing carries what it had grown, bridged at its rate from the old
   * crystal's last reading to the new one's first, so its thickness, rate, arming and the fit's
   * clock carry on.
   */
  function crystalChanged(s: ControllerState, events: RunEvent[], suspect: CrystalSuspect): ControllerState {
    const c = s.crystal;
    const layer = layerRecipe(s);
    const before = Number.isFinite(s.layerCrystalNm) ? s.layerCrystalNm : 0;
    const closeS = Number.isFinite(s.cutAtS) ? s.cutAtS + layer.shutterDelayS : Number.POSITIVE_INFINITY;
    const growing = isGrowing(s);
    const fromS = Number.isFinite(c.lastS) ? Math.max(c.lastS, s.openedAtS) : s.openedAtS;
    const rate = (Number.isFinite(c.rateNmPerS) ? c.rateNmPerS : layer.rateNmPerS) / layer.toolingFactor;
    const bridgeNm = growing ? rate * Math.max(0, Math.min(suspect.firstS, closeS) - fromS) : 0;
    const carriedNm = before + bridgeNm;
    s = {
      ...s,
      crystalUnit: { referenceHz: suspect.firstHz, stack: [], layer: s.index, carriedNm },
      layerCrystalNm: Number.isFinite(s.layerCrystalNm) ? carriedNm : s.layerCrystalNm,
      crystal: { ...c, frequencyHz: suspect.firstHz, lastS: suspect.firstS, partNm: Number.isFinite(c.partNm) ? carriedNm * layer.toolingFactor : c.partNm, suspect: null },
    };
    return alert(s, events, 'crystal-changed', `${ALERTS['crystal-changed'].sentence} (${suspect.firstHz.toFixed(0)} Hz)`);
  }

  /** Everything that follows from the state at its current time: starts, cuts, finishes, guards. */
  function advance(s: ControllerState, events: RunEvent[]): ControllerState {
    if (s.nowS >= s.faultsDueS) s = reportFaults(s, events);
    if ((s.phase === 'closing' || awaitingOwnClose(s)) && s.nowS >= s.cutAtS + layerRecipe(s).shutterDelayS + opts.settleS) {
      if (!s.unconfirmedCloses.includes(layerRecipe(s).materialName)) return finishLayer(s, events, false);
      if (s.phase === 'awaiting-close') return s;
      // Its shutter may still be open: the layer is not finished, and goes on growing in its
      // records (crystal, fit) until the close is confirmed.
      return alertUnconfirmed({ ...s, phase: 'awaiting-close' }, events);
    }
    if (s.phase === 'awaiting-close' && s.nowS >= s.awaitingSinceS + opts.settleS) return alertUnconfirmed(s, events);
    if (s.phase !== 'depositing') return s;
    const plan = layerPlan(s);
    const layer = layerRecipe(s);
    const elapsed = s.nowS - s.openedAtS;

    // A silent channel (or one set aside for the layer) hands the layer on; one answering again takes it back.
    const opticalSilent = s.optical.distrusted || !(s.nowS - (Number.isNaN(s.lastOpticalS) ? s.openedAtS : Math.max(s.lastOpticalS, s.openedAtS)) < opts.staleAfterS);
    const crystalSilent =
      s.crystal.distrustLayer === s.index || !(s.nowS - (Number.isNaN(s.lastCrystalS) ? s.openedAtS : Math.max(s.lastCrystalS, s.openedAtS)) < opts.staleAfterS);
    if ((s.mode === 'level' || s.mode === 'turning-point') && opticalSilent) s = alert(s, events, 'optical-lost', ALERTS['optical-lost'].sentence);
    if (crystalSilent && !s.crystalAlerted) s = alert({ ...s, crystalAlerted: true }, events, 'crystal-lost', ALERTS['crystal-lost'].sentence);
    const wanted = wantedMode(s, plan, opticalSilent, crystalSilent);
    if (wanted !== s.mode) s = changeMode(s, events, wanted, wanted === plan.cut ? 'mode-restored' : wanted === 'crystal' ? 'crystal-fallback' : 'time-fallback');

    const rate = Number.isFinite(s.crystal.rateNmPerS) && !crystalSilent ? s.crystal.rateNmPerS : layer.rateNmPerS;
    const thickness = !crystalSilent && Number.isFinite(s.crystal.partNm) ? s.crystal.partNm : layer.rateNmPerS * elapsed;
    const delayNm = rate * layer.shutterDelayS;

    if (!s.rateAlerted && !crystalSilent && elapsed > 3 * opts.rateSmoothingS && Number.isFinite(s.crystal.rateNmPerS)) {
      const off = Math.abs(s.crystal.rateNmPerS / layer.rateNmPerS - 1) * 100;
      if (off > layer.rateBandPercent) {
        s = alert({ ...s, rateAlerted: true }, events, 'rate-out-of-band', `Rate ${s.crystal.rateNmPerS.toFixed(3)} nm/s is ${off.toFixed(0)} % off the planned ${layer.rateNmPerS} nm/s.`);
      }
    }

    // Guard rails.
    if (!crystalSilent && thickness > opts.thicknessCeiling * plan.targetNm) {
      s = alert(s, events, 'thickness-ceiling', `${ALERTS['thickness-ceiling'].sentence} (${thickness.toFixed(1)} nm of ${plan.targetNm.toFixed(1)} nm)`);
      return cut(s, events, 'thickness-ceiling', thickness + delayNm, delayNm);
    }
    if (elapsed > opts.timeCeiling * plan.durationS) {
      s = alert(s, events, 'time-ceiling', `${ALERTS['time-ceiling'].sentence} (${elapsed.toFixed(0)} s of ${plan.durationS.toFixed(0)} s planned)`);
      return cut(s, events, 'time-ceiling', thickness + delayNm, delayNm);
    }

    if (!s.approachingSent) {
      const expectedInS = (plan.targetNm - thickness) / rate - layer.shutterDelayS;
      if (expectedInS <= opts.approachingS) {
        events.push({ type: 'approaching-cut', timeS: s.nowS, layer: layer.number, expectedInS: Math.max(0, expectedInS) });
        s = { ...s, approachingSent: true };
      }
    }

    const armed = thickness >= opts.armFraction * plan.targetNm;
    if (s.fit && (s.mode === 'level' || s.mode === 'turning-point')) {
      if (s.fit.clock === 'crystal' && crystalSilent) {
        // The fit's clock has stopped: the plain rule of the layer's mode carries on.
        s = { ...s, fit: null };
      } else {
        // The fit's clock runs at the crystal rate over the planned one (1 on the time clock);
        // cut at the reading nearest the right instant: up to half a reading interval early.
        const clockRate = s.fit.clock === 'crystal' ? rate / layer.rateNmPerS : 1;
        const cutClock = s.fit.fit.cutTimeS(plan.chipTargetNm + fitOvershootNm(s.mode, layer.overshootFraction, plan), layer.shutterDelayS * clockRate);
        const halfStep = (0.5 * clockRate) / recipe.monitor.sampleRateHz;
        if (armed && fitClockAt(recipe, s, s.nowS) + halfStep >= cutClock) {
          const est = s.fit.fit.estimate(cutClock + layer.shutterDelayS * clockRate);
          return cut(s, events, 'model-fit', est.thicknessNm / est.indexFactor / layer.chipRatio, delayNm);
        }
        return s;
      }
    }
    const materialRate = opts.estimator === 'fit' ? s.materialRate[layer.materialName] : undefined;
    const calibration = materialRate ? { rate: materialRate.factor, index: s.materialIndex[layer.materialName]?.factor ?? 1 } : undefined;
    switch (s.mode) {
      case 'level':
        if (armed && s.optical.beyond >= opts.debounceReadings) return cut(s, events, 'trigger-level', plan.targetNm, delayNm);
        return s;
      case 'turning-point': {
        if (!armed) return s;
        const o = s.optical;
        const needed = o.turnsNeeded + 1;
        const overshoot = layer.overshootFraction * plan.swing;
        if (o.turnsPassed >= needed && Math.abs(o.smoothed - o.extreme) >= overshoot) {
          return cut(s, events, 'turning-point', plan.targetNm, delayNm);
        }
        return s;
      }
      case 'crystal':
        if (crystalSilent) return s;
        if (calibration) {
          // The optical fits of the material's earlier layers calibrate the crystal: cut at the optical thickness.
          if (calibration.rate * (thickness + delayNm) >= plan.targetNm) {
            // The layer is recorded at its crystal thickness: resolvedStack calibrates it (now and as the calibration improves).
            return cut(s, events, 'crystal-calibrated', (calibration.rate * (thickness + delayNm)) / calibration.index, delayNm, thickness + delayNm);
          }
          return s;
        }
        if (thickness + delayNm >= plan.targetNm) return cut(s, events, 'crystal-thickness', thickness + delayNm, delayNm);
        return s;
      case 'time':
        if (elapsed + layer.shutterDelayS >= plan.targetNm / layer.rateNmPerS) {
          return cut(s, events, 'time', layer.rateNmPerS * (elapsed + layer.shutterDelayS), delayNm);
        }
        return s;
    }
  }

  /**
   * The mode the layer should be cut in now: its planned one while its monitor answers, else the
   * crystal, else the clock. Leaving a mode takes silence (staleAfterS); coming back to one takes
   * recoverS of unbroken readings, and for an optical layer without the fit (which runs on its
   * own clock through a gap) a level layer whose gap hid at most one turning point, which the
   * turn detector still counts when the signal shows up past it. A turning-point layer on the
   * plain rule stays on the crystal: its detector, having lost the extremum's approach, cut a
   * harsh-profile mirror layer 36 nm thin where the crystal had been within 2 nm.
   */
  function wantedMode(s: ControllerState, plan: LayerPlan, opticalSilent: boolean, crystalSilent: boolean): CutMode {
    const planned = plan.cut;
    if (planned === 'time') return s.mode;
    const optical = planned === 'level' || planned === 'turning-point';
    const opticalUsable = optical && !opticalSilent && (s.mode === planned || (s.nowS - s.optical.since >= opts.recoverS && (s.fit !== null || (planned === 'level' && gapHidesOneTurnAtMost(s, plan, crystalSilent)))));
    if (opticalUsable) return planned;
    const crystalUsable = !crystalSilent && (s.mode === 'crystal' || s.nowS - s.crystal.since >= opts.recoverS);
    return crystalUsable ? 'crystal' : 'time';
  }

  /** Whether the optical gap before the present run of readings spans at most one of the layer's planned turning points. */
  function gapHidesOneTurnAtMost(s: ControllerState, plan: LayerPlan, crystalSilent: boolean): boolean {
    const layer = layerRecipe(s);
    const elapsed = s.nowS - s.openedAtS;
    const partNm = !crystalSilent && Number.isFinite(s.crystal.partNm) ? s.crystal.partNm : layer.rateNmPerS * elapsed;
    const rate = !crystalSilent && Number.isFinite(s.crystal.rateNmPerS) ? s.crystal.rateNmPerS : layer.rateNmPerS;
    const chip = (nm: number): number => nm * layer.chipRatio;
    // The gap's span on the chip, widened by a tenth of the target for the rate's error.
    const margin = 0.1 * plan.chipTargetNm;
    const fromNm = chip(partNm - rate * (s.nowS - s.optical.gapFromS)) - margin;
    const toNm = chip(partNm - rate * (s.nowS - s.optical.since)) + margin;
    return plan.turningPoints.filter((tp) => tp.thicknessNm >= fromNm && tp.thicknessNm <= toNm).length <= 1;
  }

  function cut(s: ControllerState, events: RunEvent[], reason: CutReason, estimatedNm: number, delayAllowanceNm: number, recordedNm = estimatedNm): ControllerState {
    const layer = layerRecipe(s);
    events.push({ type: 'cut', timeS: s.nowS, layer: layer.number, reason, estimatedNm, delayAllowanceNm, signal: s.optical.value });
    s = sendShutter(s, events, 'close', layer.materialName, layer.number, s.nowS);
    return { ...s, phase: 'closing', cutAtS: s.nowS, achievedNm: [...s.achievedNm, recordedNm] };
  }

  function finishLayer(s: ControllerState, events: RunEvent[], skipped: boolean): ControllerState {
    const layer = layerRecipe(s);
    const indexFactors = [...s.indexFactors];
    indexFactors[s.index] = Number.NaN;
    const opticalNm = [...s.opticalNm];
    opticalNm[s.index] = Number.NaN;
    let materialIndex = s.materialIndex;
    let materialRate = s.materialRate;
    let record: RefitLayer | null = null;
    const planned = layerPlan(s).cut;
    const fitCut = s.mode === 'level' || s.mode === 'turning-point';
    const watched = s.mode === planned && (planned === 'crystal' || planned === 'time');
    if (s.fit && !skipped && Number.isFinite(s.cutAtS) && (fitCut || watched)) {
      // Refit with every reading, those after the shutter closed included (u constant then).
      const closeClock = fitClockAt(recipe, s, s.cutAtS + layer.shutterDelayS);
      const final = s.fit.fit.finalThickness(closeClock);
      if (s.fit.clock === 'crystal' && opts.chipRefit) record = binnedRecord(s.fit.fit, s.index, closeClock);
      const partNm = s.achievedNm[s.index] ?? 0;
      if (Number.isFinite(final.thicknessNm) && final.indexFactor > 0 && final.thicknessNm > 0) {
        if (fitCut && s.fit.clock === 'crystal' && final.rateSigma > 0) {
          const plannedRate = layer.rateNmPerS * layer.chipRatio;
          materialRate = { ...materialRate, [layer.materialName]: { factor: final.rateNmPerS / plannedRate, sigma: final.rateSigma / plannedRate } };
        }
        if (fitCut) {
          // The fit's u is the optical thickness at the design index: physically u/κ at index κ·n.
          const achievedNm = [...s.achievedNm];
          achievedNm[s.index] = final.thicknessNm / final.indexFactor / layer.chipRatio;
          indexFactors[s.index] = final.indexFactor;
          // The fit's prior was the material's estimate so far: its posterior is the new estimate.
          if (final.indexSigma > 0) materialIndex = { ...materialIndex, [layer.materialName]: { factor: final.indexFactor, sigma: final.indexSigma } };
          s = { ...s, achievedNm };
        } else if (partNm > 0) {
          // Cut on the crystal and watched by the fit: the optical thickness the signal showed.
          opticalNm[s.index] = final.thicknessNm / layer.chipRatio;
        }
      }
    }
    // A crystal set aside or silent at the layer's end did not see all of it: its record is
    // unknown, and the crystal's next reading becomes its reference (crystalReference).
    const followed = s.crystal.distrustLayer !== s.index && s.nowS - s.lastCrystalS < opts.staleAfterS;
    const crystalNm = !followed ? Number.NaN : Number.isFinite(s.layerCrystalNm) ? s.layerCrystalNm : 0;
    const crystalBelow = [...s.crystalBelow, { thicknessNm: crystalNm, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio }];
    // The crystal in use carries only what grew on it.
    const unit = s.crystalUnit;
    const onUnitNm = Math.max(0, crystalNm - (unit.layer === s.index ? unit.carriedNm : 0));
    const crystalUnit = followed ? { ...unit, stack: [...unit.stack, { thicknessNm: onUnitNm, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio }] } : UNKNOWN_CRYSTAL;
    s = { ...s, indexFactors, opticalNm, materialIndex, materialRate, crystalBelow, crystalUnit };
    if (record) s = refitRecords({ ...s, chipRecords: [...s.chipRecords, record].slice(-REFIT_LAYERS) });
    const materialAfter = [...s.materialAfter];
    materialAfter[s.index] = { rate: s.materialRate, index: s.materialIndex };
    s = { ...s, materialAfter };
    const resolved = resolvedStack(s);
    const estimatedNm = resolved.partNm[s.index] ?? 0;
    events.push({
      type: 'layer-finished',
      timeS: s.nowS,
      layer: layer.number,
      estimatedNm,
      crystalNm: crystalNm * layer.toolingFactor,
      indexFactor: resolved.indexFactors[s.index] as number,
      skipped,
    });
    let next: ControllerState = s;
    if (s.index + 1 >= recipe.layers.length) return proceed(next, events);
    if (compensation && recipe.design.band && s.index + 1 < recipe.layers.length) next = compensateRest(next, events);
    if (opts.replan || compensation) {
      const stack = resolvedStack(next);
      const plan = planRun(withTargets(recipe, next.targetsNm), { achievedNm: stack.partNm, achievedIndexFactors: stack.indexFactors, suggest: 'none', stackPrecision: false });
      events.push({ type: 'replanned', timeS: s.nowS, fromLayer: plan.fromLayer, triggerSignals: plan.layers.map((l) => l.triggerSignal) });
      next = { ...next, plan };
    }
    return proceed({ ...next, index: s.index + 1 }, events);
  }

  /**
   * After a layer: the next one starts (or, after the last, the run completes) once every close
   * is confirmed; until then the run waits, alerting once if the wait outlasts `settleS`.
   */
  function proceed(s: ControllerState, events: RunEvent[]): ControllerState {
    if (s.unconfirmedCloses.length > 0) {
      return s.phase === 'awaiting-close' ? s : { ...s, phase: 'awaiting-close', awaitingSinceS: s.nowS };
    }
    // The layer at `index` has been cut (its estimate recorded): the run is over.
    if (s.achievedNm.length > s.index) {
      events.push({ type: 'run-finished', timeS: s.nowS, outcome: 'complete' });
      return { ...s, phase: 'finished' };
    }
    return startLayer(s, events);
  }

  /** A shutter command, and what it does to the closes awaiting confirmation (the newest command for a shutter replaces an older close). */
  function sendShutter(s: ControllerState, events: RunEvent[], action: 'open' | 'close', source: string, layer: number, timeS: number): ControllerState {
    events.push({ type: 'shutter', timeS, command: shutter(action, source, layer, timeS) });
    const awaited = action === 'close' && opts.confirmCloses;
    if (awaited === s.unconfirmedCloses.includes(source)) return s;
    return { ...s, unconfirmedCloses: awaited ? [...s.unconfirmedCloses, source] : s.unconfirmedCloses.filter((name) => name !== source) };
  }

  /** The wait for unconfirmed closes, said once (awaitingSinceS NaN from then on). */
  function alertUnconfirmed(s: ControllerState, events: RunEvent[]): ControllerState {
    return alert({ ...s, awaitingSinceS: Number.NaN }, events, 'close-unconfirmed', `${ALERTS['close-unconfirmed'].sentence} (${s.unconfirmedCloses.join(', ')})`);
  }

  function onShutterAck(s: ControllerState, ack: ShutterAck, events: RunEvent[]): StepResult {
    if (ack.action !== 'close' || !s.unconfirmedCloses.includes(ack.source)) return { state: s, events: NO_EVENTS };
    let next: ControllerState = { ...s, nowS: Math.max(s.nowS, ack.timeS), unconfirmedCloses: s.unconfirmedCloses.filter((n) => n !== ack.source) };
    if (next.phase === 'awaiting-close' && (next.unconfirmedCloses.length === 0 || (awaitingOwnClose(next) && ack.source === layerRecipe(next).materialName))) {
      // Said only where the wait was alerted.
      if (Number.isNaN(next.awaitingSinceS)) next = alert(next, events, 'close-confirmed', `${ALERTS['close-confirmed'].sentence} (${ack.source})`);
      next = { ...next, awaitingSinceS: Number.NaN };
      next = awaitingOwnClose(next) ? finishLayer(next, events, false) : proceed(next, events);
    }
    return { state: next, events: events.length === 0 ? NO_EVENTS : events };
  }

  /**
   * A command that may not have taken effect. A close stays unconfirmed until acknowledged (the
   * output re-sends it); an open of the layer in progress holds the layer, its shutter asked to
   * close, since the source may be shut while the clock runs. Alerted at the first failure and
   * when the output gives up, the attempts counted.
   */
  function onShutterFault(s: ControllerState, fault: ShutterFault, events: RunEvent[]): ControllerState {
    let next: ControllerState = { ...s, nowS: Number.isFinite(s.nowS) ? Math.max(s.nowS, fault.timeS) : fault.timeS };
    if (fault.attempt === 1 || fault.final) {
      const tries = fault.attempt > 1 ? `, attempt ${fault.attempt}${fault.final ? ', given up' : ''}` : fault.final ? '' : ', re-sending';
      next = alert(next, events, fault.code, `${ALERTS[fault.code].sentence} (${fault.source} ${fault.action}${tries}: ${fault.detail})`);
    }
    if (fault.action === 'close') {
      if (!next.unconfirmedCloses.includes(fault.source)) next = { ...next, unconfirmedCloses: [...next.unconfirmedCloses, fault.source] };
      return next;
    }
    const layer = recipe.layers[next.index];
    if (fault.final && next.phase === 'depositing' && layer?.materialName === fault.source && layer.number === fault.layer) {
      events.push({ type: 'held', timeS: next.nowS, layer: layer.number });
      next = sendShutter(next, events, 'close', layer.materialName, layer.number, next.nowS);
      next = { ...next, phase: 'holding', phaseBeforeHold: 'depositing' };
    }
    return next;
  }

  function onLink(s: ControllerState, change: LinkChange, events: RunEvent[]): ControllerState {
    const down = s.linksDown.includes(change.link);
    if ((change.state === 'lost') === down) return s;
    let next: ControllerState = {
      ...s,
      nowS: Number.isFinite(s.nowS) ? Math.max(s.nowS, change.timeS) : change.timeS,
      linksDown: down ? s.linksDown.filter((l) => l !== change.link) : [...s.linksDown, change.link],
    };
    const code = down ? 'source-restored' : 'source-lost';
    next = alert(next, events, code, `${ALERTS[code].sentence} (${change.link}: ${change.detail})`);
    return next;
  }

  /**
   * Re-optimises the thicknesses of the layers still to come so that the finished stack's
   * spectrum over the design band stays closest to the design's, the finished layers at their
   * estimates (src/model/design/compensate.ts).
   */
  function compensateRest(s: ControllerState, events: RunEvent[]): ControllerState {
    const band = recipe.design.band as { fromNm: number; toNm: number };
    const fixed = s.index + 1;
    // The stack as deposited: the finished layers at their estimates (physical, in their
    // estimated media), the later ones in their material's estimated medium at the physical
    // thickness their cut targets (optical, in design-index nm) give, u/κ.
    const stack = resolvedStack(s);
    const factors = recipe.layers.map((l, i) => (i < fixed ? (stack.indexFactors[i] ?? 1) : (s.materialIndex[l.materialName]?.factor ?? 1)));
    const current = s.targetsNm.map((t, i) => (i < fixed ? (stack.partNm[i] ?? t) : t / (factors[i] as number)));
    const design = recipe.design.stack;
    const deposited = { ...design, layers: design.layers.map((l, i) => ({ ...l, dispersion: scaledDispersion(l.dispersion, factors[i] as number, 0) })) };
    const result = compensate(design, current, fixed, {
      deposited,
      fromNm: band.fromNm,
      toNm: band.toNm,
      quantity: compensation?.quantity ?? 'T',
      boundsFraction: (compensation?.boundsPercent ?? 10) / 100,
      stepNm: compensation?.stepNm ?? 5,
    });
    const targetsNm = Array.from(result.thicknessNm, (t, i) => (i < fixed ? (s.targetsNm[i] as number) : t * (factors[i] as number)));
    events.push({
      type: 'compensated',
      timeS: s.nowS,
      fromLayer: fixed + 1,
      beforeNm: s.targetsNm.slice(fixed),
      afterNm: targetsNm.slice(fixed),
      rmsBefore: result.rmsBefore,
      rmsAfter: result.rmsAfter,
    });
    return { ...s, targetsNm };
  }

  function startLayer(s: ControllerState, events: RunEvent[]): ControllerState {
    const layer = layerRecipe(s);
    const plan = layerPlan(s);
    events.push({ type: 'layer-started', timeS: s.nowS, layer: layer.number, material: layer.materialName, cut: plan.cut, targetNm: plan.targetNm });
    events.push({ type: 'shutter', timeS: s.nowS, command: shutter('open', layer.materialName, layer.number, s.nowS) });
    // Not yet heard counts as alive, as for the silence guard (the first reading may come just after the opening).
    const crystalAlive = Number.isNaN(s.lastCrystalS) || s.nowS - s.lastCrystalS < opts.staleAfterS;
    // A new chip starts a new refit, its priors what the earlier chips showed.
    const recorded = s.chipRecords[0];
    if (recorded && (recipe.layers[recorded.index] as ResolvedRecipe['layers'][number]).chip !== layer.chip) s = { ...s, chipRecords: [] };
    return {
      ...s,
      phase: 'depositing',
      mode: plan.cut,
      openedAtS: s.nowS,
      cutAtS: Number.NaN,
      optical: freshOptical(plan, confirmStep(plan)),
      crystal: { ...s.crystal, partNm: Number.NaN, rateNmPerS: Number.NaN },
      approachingSent: false,
      rateAlerted: false,
      crystalAlerted: false,
      layerCrystalNm: Number.NaN,
      // Layers cut on the crystal are watched by the fit too: the chip model of the later layers takes their optical thickness from it.
      fit: opts.estimator === 'fit' && plan.cut !== 'time' && (plan.cut !== 'crystal' || crystalAlive) ? startFit(s, crystalAlive ? 'crystal' : 'time') : null,
    };
  }

  /**
   * A model fit for the layer about to start, on the chip as the estimates left it (thicknesses
   * and indices, resolvedStack), its index and its rate on the crystal's clock starting from what
   * the material's earlier layers showed. (The monitor's gain is not carried over from the layer
   * below: at a high-reflectance stack's low transmission the chip model's small errors move the
   * signal's level by per cents, and a gain held to the last layer's would push that into κ.)
   */
  function startFit(s: ControllerState, clock: 'crystal' | 'time'): FitRun {
    const layer = layerRecipe(s);
    const plan = layerPlan(s);
    const stack = resolvedStack(s);
    const view = { indexFactors: stack.indexFactors };
    const monitor = chipMonitorFor(recipe, s.index, stack.partNm, view);
    const table = layerSignalTable(monitor, plan.chipTargetNm);
    const withIndex = opts.indexSigma > 0;
    const index = withIndex
      ? buildIndexTables(
          table,
          chipMonitorFor(recipe, s.index, stack.partNm, { ...view, growingIndexFactor: 1 + INDEX_DELTA }),
          chipMonitorFor(recipe, s.index, stack.partNm, { ...view, growingIndexFactor: 1 - INDEX_DELTA }),
          INDEX_DELTA,
        )
      : undefined;
    const known = s.materialIndex[layer.materialName];
    const rateKnown = clock === 'crystal' ? s.materialRate[layer.materialName] : undefined;
    const fit = createLayerFit({
      monitor,
      table,
      targetNm: plan.chipTargetNm,
      rateNmPerS: layer.rateNmPerS * layer.chipRatio * (rateKnown?.factor ?? 1),
      rateSigmaFraction: rateKnown ? Math.hypot(rateKnown.sigma / rateKnown.factor, RATE_RUN_SIGMA) : DEFAULT_PRIORS.rateSigmaFraction,
      gainSigma: DEFAULT_PRIORS.gainSigma,
      offsetSigma: DEFAULT_PRIORS.offsetSigma,
      noise,
      ...(clock === 'crystal' ? { startSigmaNm: CLOCK_START_SIGMA_NM } : {}),
      ...(index ? { indexSigma: known ? Math.hypot(known.sigma, INDEX_RUN_SIGMA) : opts.indexSigma, indexFactor: known?.factor ?? 1, indexTables: index } : {}),
    });
    return { fit, clock };
  }

  /**
   * Refits the current chip's recorded layers together (src/model/estimate/chip-refit.ts) and
   * takes its thicknesses, indices and material factors for everything that follows.
   */
  function refitRecords(s: ControllerState): ControllerState {
    const stack = resolvedStack(s);
    const first = (s.chipRecords[0] as RefitLayer).index;
    const priors = s.materialAfter[first - 1] ?? { rate: {}, index: {} };
    const result = refitChip(recipe, s.chipRecords, {
      noise,
      fixedPartNm: stack.partNm,
      fixedIndexFactors: stack.indexFactors,
      ratePriors: priors.rate,
      indexPriors: priors.index,
      defaultRateSigma: DEFAULT_PRIORS.rateSigmaFraction,
      defaultIndexSigma: opts.indexSigma > 0 ? opts.indexSigma : 1e-6,
      startSigmaNm: CLOCK_START_SIGMA_NM,
      rateSpread: RATE_RUN_SIGMA,
      gainSigma: DEFAULT_PRIORS.gainSigma,
      offsetSigma: DEFAULT_PRIORS.offsetSigma,
      startRate: Object.fromEntries(Object.entries(s.materialRate).map(([name, r]) => [name, r.factor])),
      startIndex: Object.fromEntries(Object.entries(s.materialIndex).map(([name, r]) => [name, r.factor])),
    });
    const achievedNm = [...s.achievedNm];
    const indexFactors = [...s.indexFactors];
    for (const l of result.layers) {
      if (!(l.partNm > 0) || !(l.indexFactor > 0)) continue;
      achievedNm[l.index] = l.partNm;
      indexFactors[l.index] = l.indexFactor;
    }
    // The next refit starts where this one ended.
    const chipRecords = s.chipRecords.map((r, j) => ({ ...r, start: (result.layers[j] as RefitLayerResult).parameters }));
    return { ...s, achievedNm, indexFactors, chipRecords, materialRate: { ...s.materialRate, ...result.rate }, materialIndex: { ...s.materialIndex, ...result.index } };
  }

  /**
   * The finished layers as the chip model and the re-plan take them: physical part thickness and
   * index factor. A layer the fit cut: its own estimates (u/κ and κ). A layer cut on the crystal:
   * once the fits of its material have calibrated the material's rate on the crystal's clock (ρ,
   * to CALIBRATED_RATE_SIGMA), its crystal thickness made optical, u = ρ·crystal, at the
   * material's index — re-resolved as the calibration improves, so that a first layer cut blind
   * does not hold the chip model of the later ones hostage; before that, the optical thickness
   * the watching fit saw, else the crystal's at the material's index (1 before any estimate).
   * (Replacing a fitted layer's own estimate by ρ·crystal too was tried: ρ is known to a few
   * tenths of a per cent, a layer's own fit to a few hundredths, so it loses.)
   */
  function resolvedStack(s: ControllerState): { partNm: number[]; indexFactors: number[] } {
    const partNm: number[] = [];
    const indexFactors: number[] = [];
    s.achievedNm.forEach((achieved, i) => {
      const layer = recipe.layers[i] as ResolvedRecipe['layers'][number];
      const fitted = s.indexFactors[i] ?? Number.NaN;
      const rate = s.materialRate[layer.materialName];
      const crystalNm = (s.crystalBelow[i]?.thicknessNm ?? 0) * layer.toolingFactor;
      const known = s.materialIndex[layer.materialName]?.factor;
      if (!Number.isNaN(fitted)) {
        partNm.push(achieved);
        indexFactors.push(fitted);
        return;
      }
      if (rate && rate.sigma < CALIBRATED_RATE_SIGMA * rate.factor && crystalNm > 0) {
        const index = known ?? 1;
        partNm.push((rate.factor * crystalNm) / index);
        indexFactors.push(index);
        return;
      }
      const watched = s.opticalNm[i] ?? Number.NaN;
      // Before any fitted layer of the material, what the watching fit saw stands for its index too.
      const index = known ?? (Number.isFinite(watched) && achieved > 0 ? Math.min(1.1, Math.max(0.9, watched / achieved)) : 1);
      partNm.push((Number.isFinite(watched) ? watched : achieved * index) / index);
      indexFactors.push(index);
    });
    return { partNm, indexFactors };
  }

  function operator(s: ControllerState, command: OperatorCommand, events: RunEvent[]): StepResult {
    const timeS = Math.max(s.nowS, command.timeS);
    let next: ControllerState = { ...s, nowS: timeS };
    switch (command.action) {
      case 'start':
        if (s.phase !== 'ready') return { state: s, events: NO_EVENTS };
        events.push({ type: 'run-started', timeS, layers: recipe.layers.length });
        next = startLayer(next, events);
        break;
      case 'hold':
        if (s.phase !== 'depositing') return { state: s, events: NO_EVENTS };
        events.push({ type: 'held', timeS, layer: layerRecipe(s).number });
        next = sendShutter(next, events, 'close', layerRecipe(s).materialName, layerRecipe(s).number, timeS);
        next = { ...next, phase: 'holding', phaseBeforeHold: s.phase };
        break;
      case 'resume':
        if (s.phase === 'awaiting-close') {
          // The operator has checked the shutters by hand and vouches for them.
          next = alert(next, events, 'operator-confirmed-close', `${ALERTS['operator-confirmed-close'].sentence} (${s.unconfirmedCloses.join(', ')})`);
          next = { ...next, unconfirmedCloses: [], awaitingSinceS: Number.NaN };
          next = awaitingOwnClose(next) ? finishLayer(next, events, false) : proceed(next, events);
          break;
        }
        if (s.phase !== 'holding') return { state: s, events: NO_EVENTS };
        events.push({ type: 'resumed', timeS, layer: layerRecipe(s).number });
        next = sendShutter(next, events, 'open', layerRecipe(s).materialName, layerRecipe(s).number, timeS);
        next = { ...next, phase: 'depositing' };
        break;
      case 'cut-now': {
        if (s.phase !== 'depositing' && s.phase !== 'holding') return { state: s, events: NO_EVENTS };
        next = alert(next, events, 'operator-cut', ALERTS['operator-cut'].sentence);
        const layer = layerRecipe(s);
        const est = Number.isFinite(s.crystal.partNm) ? s.crystal.partNm : layer.rateNmPerS * (timeS - s.openedAtS);
        next = cut(next, events, 'operator', est, 0);
        break;
      }
      case 'skip-layer': {
        if (s.phase !== 'depositing' && s.phase !== 'holding') return { state: s, events: NO_EVENTS };
        next = alert(next, events, 'operator-skip', ALERTS['operator-skip'].sentence);
        const layer = layerRecipe(s);
        next = sendShutter(next, events, 'close', layer.materialName, layer.number, timeS);
        next = finishLayer({ ...next, achievedNm: [...s.achievedNm, Number.isFinite(s.crystal.partNm) ? s.crystal.partNm : 0] }, events, true);
        break;
      }
      case 'abort': {
        if (s.phase === 'finished' || s.phase === 'aborted') return { state: s, events: NO_EVENTS };
        next = alert(next, events, 'operator-abort', ALERTS['operator-abort'].sentence);
        for (const source of new Set(recipe.layers.map((l) => l.materialName))) {
          next = sendShutter(next, events, 'close', source, layerRecipe(s).number, timeS);
        }
        events.push({ type: 'run-finished', timeS, outcome: 'aborted' });
        next = { ...next, phase: 'aborted' };
        break;
      }
      case 'acknowledge': {
        const id = command.alertId;
        if (id === undefined || !s.openAlerts.includes(id)) return { state: s, events: NO_EVENTS };
        events.push({ type: 'alert-acknowledged', timeS, id });
        next = { ...next, openAlerts: s.openAlerts.filter((a) => a !== id) };
        break;
      }
    }
    return { state: next, events };
  }

  function changeMode(s: ControllerState, events: RunEvent[], to: CutMode, code: AlertCode): ControllerState {
    if (s.mode === to) return s;
    events.push({ type: 'mode-changed', timeS: s.nowS, layer: layerRecipe(s).number, from: s.mode, to });
    return alert({ ...s, mode: to }, events, code, ALERTS[code].sentence);
  }

  function alert(s: ControllerState, events: RunEvent[], code: AlertCode, message: string): ControllerState {
    const id = `A${s.alertCount + 1}`;
    const layer = s.phase === 'ready' ? null : (recipe.layers[s.index]?.number ?? null);
    events.push({ type: 'alert', timeS: Number.isFinite(s.nowS) ? s.nowS : 0, id, severity: ALERTS[code].severity, code, message, layer });
    return { ...s, alertCount: s.alertCount + 1, openAlerts: [...s.openAlerts, id] };
  }

  return { recipe, options: opts, initial, step };
}

/**
 * The state after a reading or a tick, built field by field: this runs for every reading, and an
 * object literal of fixed shape costs a few tens of nanoseconds where a spread costs hundreds.
 */
function withReading(
  s: ControllerState,
  nowS: number,
  lastOpticalS: number,
  lastCrystalS: number,
  optical: OpticalTrack,
  crystal: CrystalTrack,
  layerCrystalNm: number,
): ControllerState {
  return {
    phase: s.phase,
    phaseBeforeHold: s.phaseBeforeHold,
    index: s.index,
    plan: s.plan,
    nowS,
    openedAtS: s.openedAtS,
    cutAtS: s.cutAtS,
    mode: s.mode,
    optical,
    crystal,
    crystalBelow: s.crystalBelow,
    crystalUnit: s.crystalUnit,
    clocks: s.clocks,
    achievedNm: s.achievedNm,
    indexFactors: s.indexFactors,
    opticalNm: s.opticalNm,
    materialIndex: s.materialIndex,
    materialRate: s.materialRate,
    chipRecords: s.chipRecords,
    materialAfter: s.materialAfter,
    approachingSent: s.approachingSent,
    rateAlerted: s.rateAlerted,
    crystalAlerted: s.crystalAlerted,
    openAlerts: s.openAlerts,
    alertCount: s.alertCount,
    faults: s.faults,
    faultReports: s.faultReports,
    faultsDueS: s.faultsDueS,
    lastOpticalS,
    lastCrystalS,
    layerCrystalNm,
    fit: s.fit,
    targetsNm: s.targetsNm,
    unconfirmedCloses: s.unconfirmedCloses,
    awaitingSinceS: s.awaitingSinceS,
    linksDown: s.linksDown,
    resumedAtS: s.resumedAtS,
  };
}

const STEADY_CLOCK: ChannelClock = Object.freeze({ offsetS: 0, streak: 0, lastS: Number.NaN, firstS: Number.NaN, presentS: Number.NaN });
/** A crystal whose stack is not known: its next reading is its reference. */
const UNKNOWN_CRYSTAL: CrystalUnit = Object.freeze({ referenceHz: Number.NaN, stack: [], layer: -1, carriedNm: 0 });

function freshOptical(plan: LayerPlan | undefined, confirm: number): OpticalTrack {
  const { trend, turnsNeeded } = visibleTurns(plan, confirm);
  let low = Number.POSITIVE_INFINITY;
  let high = Number.NEGATIVE_INFINITY;
  for (const v of plan?.curve.signal ?? []) {
    if (v < low) low = v;
    if (v > high) high = v;
  }
  const jumpLimit = high >= low ? 2 * (high - low) : 0;
  // The extremum starts at the first reading, not the plan's start: gain and offset drift.
  return {
    lastS: Number.NaN,
    value: Number.NaN,
    smoothed: Number.NaN,
    extreme: Number.NaN,
    trend,
    turnsPassed: 0,
    turnsNeeded,
    beyond: 0,
    confirm,
    since: Number.NaN,
    gapFromS: Number.NaN,
    jumpLimit,
    suspects: 0,
    suspectValue: Number.NaN,
    erratic: false,
    distrusted: false,
  };
}

/**
 * The turns a threshold detector can see before the cut: an extremum that moves the signal by
 * less than twice the confirmation step from the previous one is invisible to it (a layer that
 * starts just before a shallow turn, say), so it is not waited for. Also the way the signal
 * first moves visibly.
 */
export function visibleTurns(plan: LayerPlan | undefined, confirm: number): { trend: 1 | -1; turnsNeeded: number } {
  if (!plan) return { trend: 1, turnsNeeded: 0 };
  // Turns before the cut; one at the target itself is the cut of a turning-point layer.
  const before = plan.turningPoints.filter((tp) => tp.thicknessNm < plan.chipTargetNm * (1 - 1e-3));
  const points = [...before.map((tp) => tp.signal), plan.cutSignal];
  let previous = plan.startSignal;
  let trend: 1 | -1 | 0 = 0;
  let turnsNeeded = 0;
  for (const signal of points) {
    const move = signal - previous;
    if (Math.abs(move) < 2 * confirm) continue;
    const direction = move >= 0 ? 1 : -1;
    if (trend === 0) trend = direction;
    else if (direction !== trend) {
      turnsNeeded++;
      trend = direction;
    }
    previous = signal;
  }
  // The first visible move sets the initial trend; count turns from it.
  const first = points.find((p) => Math.abs(p - plan.startSignal) >= 2 * confirm) ?? plan.cutSignal;
  return { trend: first >= plan.startSignal ? 1 : -1, turnsNeeded };
}

/**
 * A turning-point layer's set overshoot, for the fit: the recipe gives it as the fraction of the
 * swing by which the signal has come back past the extremum, the plain rule's measure; in
 * thickness that is √(2·f·swing/|S″|) past the turning point (S ≈ S_tp + ½S″Δd², as the plain
 * rule's precision in precision.ts). Chip nm; 0 for other layers or no overshoot.
 */
function fitOvershootNm(mode: CutMode, fraction: number, plan: LayerPlan): number {
  if (mode !== 'turning-point' || !(fraction > 0) || !(Math.abs(plan.curvaturePerNm2) > 0)) return 0;
  return Math.sqrt((2 * fraction * plan.swing) / Math.abs(plan.curvaturePerNm2));
}

/**
 * Waiting for the close of the layer in progress: cut (its estimate recorded), not finished (its
 * crystal record not yet taken), its shutter perhaps still open.
 */
function awaitingOwnClose(s: ControllerState): boolean {
  return s.phase === 'awaiting-close' && s.achievedNm.length > s.crystalBelow.length;
}

/** Whether the layer in progress may still be growing: its records (crystal, fit) go on. */
export function isGrowing(s: ControllerState): boolean {
  return s.phase === 'depositing' || s.phase === 'closing' || awaitingOwnClose(s);
}

/** The fit's clock at run time t: the crystal's part thickness over the planned rate, or elapsed time. */
function fitClockAt(recipe: ResolvedRecipe, s: ControllerState, timeS: number): number {
  const layer = recipe.layers[s.index] as ResolvedRecipe['layers'][number];
  if (s.fit?.clock !== 'crystal') return timeS - s.openedAtS;
  const c = s.crystal;
  // Before the layer's first crystal reading: elapsed time, the same clock at the planned rate.
  if (!Number.isFinite(c.partNm)) return timeS - s.openedAtS;
  const rate = Number.isFinite(c.rateNmPerS) ? c.rateNmPerS : layer.rateNmPerS;
  // Between crystal readings the thickness moves on at the crystal's rate (not after the close).
  const closeS = Number.isFinite(s.cutAtS) ? s.cutAtS + layer.shutterDelayS : Number.POSITIVE_INFINITY;
  const ahead = Math.max(0, Math.min(timeS, closeS) - c.lastS);
  return (c.partNm + rate * ahead) / layer.rateNmPerS;
}

/**
 * The model fit's view of the layer in progress at run time t, for display: its thickness on the
 * parts at the design index (what the cut compares with the target) and its rms, nm; null when
 * no fit runs (the plain rules, a layer the fit does not watch, a silent crystal).
 */
export function liveFitEstimate(recipe: ResolvedRecipe, s: ControllerState, timeS: number): { thicknessNm: number; sigmaNm: number } | null {
  if (!s.fit || !isGrowing(s)) return null;
  const layer = recipe.layers[s.index] as ResolvedRecipe['layers'][number];
  const e = s.fit.fit.estimate(fitClockAt(recipe, s, timeS));
  if (!Number.isFinite(e.thicknessNm) || !Number.isFinite(e.sigmaNm) || e.readings < 8) return null;
  return { thicknessNm: e.thicknessNm / layer.chipRatio, sigmaNm: e.sigmaNm / layer.chipRatio };
}

/** The recipe with other part targets (compensated), for the re-plan. */
function withTargets(recipe: ResolvedRecipe, targetsNm: readonly number[]): ResolvedRecipe {
  return { ...recipe, layers: recipe.layers.map((l, i) => ({ ...l, targetNm: targetsNm[i] ?? l.targetNm })) };
}

function shutter(action: 'open' | 'close', source: string, layer: number, timeS: number): ShutterCommand {
  return { kind: 'shutter', action, source, layer, timeS };
}
