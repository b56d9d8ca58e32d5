/**
 * The layer controller: a pure reducer `step(state, input) → { state, events }`. It decides when
 * each layer is cut from the readings' own times, never the wall clock, so a live run, a replay
 * and a simulation decide identically.
 *
 * It is a dispatcher. The parts that judge a layer speak one interface (rules/cut-rule.ts: what
 * the layer's rule needs from the plan, and per reading its estimate, its rms, cut now or not),
 * one file each: the cut rules (rules/: turning point, trigger level, crystal thickness,
 * crystal-calibrated, timed, the operator's cut, the guard rails) and the estimators they cut on
 * (estimators/: the plain rules' turn detector, the model fit, the crystal). The controller feeds
 * each reading to the estimators, keeps their state in its own, picks the layer's rule (the fit
 * where it cuts the layer, else the plain rule of the layer's mode) and acts on its verdict.
 *
 * Around them: a silent monitor hands the layer to the crystal, a silent crystal to the clock,
 * each with an alert, and a monitor that answers again takes its layer back. Readings must be
 * plausible before they are used: a timestamp more than `timeJumpS` from the run clock's
 * present, a crystal frequency no deposition rate can reach from the last one, an optical value
 * no chip can show are faults; several in a row are the instrument's: a clock re-based, a fresh
 * crystal bridged, or the instrument set aside for the layer (see {@link SUSPECT_READINGS}).
 *
 * Shutters: a close that has not been confirmed (acknowledged, or written where the chamber
 * acknowledges nothing; with `confirmCloses`, every close until then; without, a close the shutter
 * output reported failing) keeps the next layer from opening and the run from completing: the
 * controller waits (`awaiting-close`) and alerts, and goes on when the confirmation comes or the
 * operator, having checked the shutter by hand, resumes.
 */
import { planRun, type LayerPlan, type RunPlan } from '../model/plan/plan.ts';
import type { CutMode, ResolvedRecipe } from '../model/plan/recipe.ts';
import { alert as raiseAlert, fault as countFault, reportFaults } from './alerts.ts';
import { compensateRest, enterLayerFit, refitRecords, REFIT_LAYERS, withTargets } from './chip-model.ts';
import { resolvedStack } from './resolved-stack.ts';
import { ALERTS, type AlertCode } from './codes.ts';
import { DEFAULT_CONTROLLER_OPTIONS, type ControllerContext, type ControllerOptions } from './controller-options.ts';
import {
  awaitingOwnClose,
  freshOptical,
  isGrowing,
  layerPlanOf,
  layerRecipeOf,
  STEADY_CLOCK,
  SUSPECT_READINGS,
  UNKNOWN_CRYSTAL,
  withReading,
  type ControllerState,
} from './controller-state.ts';
import { readCrystal } from './estimators/crystal.ts';
import { fitBridges, fitCalibratedCrystalRule, fitClockAt, fitEstimateAt, fitNoise, leftToCrystal, modelFitRule, startFit } from './estimators/model-fit.ts';
import { confirmStep, startTurnDetector } from './estimators/turn-detector.ts';
import type { RunEvent } from './events.ts';
import { monitorBackTooLate, wantedMode } from './fallbacks.ts';
import { readOptical } from './optical-channel.ts';
import { crystalCalibratedRule } from './rules/crystal-calibrated.ts';
import { crystalThicknessRule } from './rules/crystal-thickness.ts';
import type { Cut, CutRule, LayerNow, RecipeLayer, ThicknessEstimate } from './rules/cut-rule.ts';
import { createGuardRails } from './rules/guard-rails.ts';
import { operatorCutRule } from './rules/operator-cut.ts';
import { timedRule } from './rules/timed.ts';
import { createTriggerLevelRule } from './rules/trigger-level.ts';
import { turningPointRule } from './rules/turning-point.ts';
import type { FaultCode, LinkChange, OperatorCommand, PipelineInput, Reading, ShutterAck, ShutterCommand, ShutterFault } from './types.ts';

export { DEFAULT_CONTROLLER_OPTIONS, type ControllerOptions } from './controller-options.ts';
export { isGrowing, type ControllerState, type Phase } from './controller-state.ts';

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
  /**
   * The estimate of the layer in progress by the rule that cuts it now (the fit's where the fit
   * cuts it, else the crystal's or the clock's with the plan's precision of the plain rule), at
   * the state's present; null when no layer grows or the rule has none yet.
   */
  estimate(state: ControllerState): ThicknessEstimate | null;
}

/** A rule bound to what it watches. */
interface LayerRule {
  estimate(now: LayerNow): ThicknessEstimate | null;
  decide(now: LayerNow): Cut | null;
}

function bound<Own>(rule: CutRule<Own>, own: Own): LayerRule {
  return { estimate: (now) => rule.estimate(own, now), decide: (now) => rule.decide(own, now) };
}

const isOptical = (mode: CutMode): boolean => mode === 'level' || mode === 'turning-point';

export function createController(recipe: ResolvedRecipe, options: Partial<ControllerOptions> = {}): Controller {
  const opts: ControllerOptions = { ...DEFAULT_CONTROLLER_OPTIONS, ...options };
  const noise = recipe.monitor.noisePercent / 100;
  const f0 = recipe.crystal.bareFrequencyHz;
  const ctx: ControllerContext = { recipe, opts, noise };
  const compensation = recipe.compensation?.enabled ? recipe.compensation : undefined;
  const triggerLevelRule = createTriggerLevelRule(opts.debounceReadings);
  const guardRails = createGuardRails(opts);

  const layerPlan = layerPlanOf;
  const layerRecipe = (s: ControllerState): RecipeLayer => layerRecipeOf(recipe, s);
  const alert = (s: ControllerState, events: RunEvent[], code: AlertCode, message: string): ControllerState => raiseAlert(recipe, s, events, code, message);
  const fault = (s: ControllerState, events: RunEvent[], code: FaultCode, line: string): ControllerState => countFault(recipe, s, events, code, line);
  const turnDetectorFor = (plan: LayerPlan | undefined) => startTurnDetector(plan, confirmStep(plan, noise, opts));

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
      optical: freshOptical(plan.layers[0]),
      turns: turnDetectorFor(plan.layers[0]),
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
      monitorNoise: Number.NaN,
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
      case 'spectrum':
        // The spectral monitor's readings pass through to the journal and the dashboard; no rule
        // uses them yet (the broadband estimator will), so they neither decide nor move the clock.
        return { state: s, events: NO_EVENTS };
      case 'tick':
        if (!(input.timeS >= s.nowS)) return { state: s, events: NO_EVENTS };
        s = withReading(s, input.timeS, s.lastOpticalS, s.lastCrystalS, s.optical, s.turns, s.crystal, s.layerCrystalNm);
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
        s = reading.channel === 'optical' ? readOptical(ctx, s, reading, events) : readCrystal(ctx, s, reading, events);
        break;
      }
    }
    s = advance(s, events);
    return { state: s, events: events.length === 0 ? NO_EVENTS : events };
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

  /** Whether the crystal is silent for the layer in progress (or set aside for it). */
  function crystalSilentNow(s: ControllerState): boolean {
    return s.crystal.distrustLayer === s.index || !(s.nowS - (Number.isNaN(s.lastCrystalS) ? s.openedAtS : Math.max(s.lastCrystalS, s.openedAtS)) < opts.staleAfterS);
  }

  /** The layer in progress at the state's present, as every rule sees it. */
  function layerNow(s: ControllerState, crystalSilent: boolean): LayerNow {
    const plan = layerPlan(s);
    const layer = layerRecipe(s);
    const elapsedS = s.nowS - s.openedAtS;
    const rateNmPerS = Number.isFinite(s.crystal.rateNmPerS) && !crystalSilent ? s.crystal.rateNmPerS : layer.rateNmPerS;
    const thicknessNm = !crystalSilent && Number.isFinite(s.crystal.partNm) ? s.crystal.partNm : layer.rateNmPerS * elapsedS;
    return {
      plan,
      layer,
      mode: s.mode,
      sampleRateHz: recipe.monitor.sampleRateHz,
      nowS: s.nowS,
      elapsedS,
      thicknessNm,
      crystalNm: s.crystal.partNm,
      rateNmPerS,
      delayNm: rateNmPerS * layer.shutterDelayS,
      armed: thicknessNm >= opts.armFraction * plan.targetNm,
      crystalSilent,
    };
  }

  /**
   * The rule that cuts the layer now, bound to what it watches: the model fit where it runs on an
   * optical layer, else the plain rule of the layer's mode (on the crystal, calibrated by the
   * fits of the material's earlier layers once there are any).
   */
  function layerRule(s: ControllerState): LayerRule {
    if (s.fit && isOptical(s.mode)) return bound(modelFitRule, { run: s.fit, clockS: fitClockAt(layerRecipe(s), s.fit, s, s.nowS) });
    if (s.fit && fitBridges(s.fit, s.mode, layerPlan(s).cut)) return bound(fitCalibratedCrystalRule, { run: s.fit, clockS: fitClockAt(layerRecipe(s), s.fit, s, s.nowS) });
    switch (s.mode) {
      case 'level':
        return bound(triggerLevelRule, s.turns);
      case 'turning-point':
        return bound(turningPointRule, s.turns);
      case 'crystal': {
        const material = layerRecipe(s).materialName;
        const rate = opts.estimator === 'fit' ? s.materialRate[material] : undefined;
        if (rate) return bound(crystalCalibratedRule, { rate: rate.factor, index: s.materialIndex[material]?.factor ?? 1 });
        return bound(crystalThicknessRule, null);
      }
      case 'time':
        return bound(timedRule, null);
    }
  }

  function estimate(s: ControllerState): ThicknessEstimate | null {
    if (!isGrowing(s)) return null;
    return layerRule(s).estimate(layerNow(s, crystalSilentNow(s)));
  }

  /** Everything that follows from the state at its current time: starts, cuts, finishes, guards. */
  function advance(s: ControllerState, events: RunEvent[]): ControllerState {
    if (s.nowS >= s.faultsDueS) s = reportFaults(recipe, s, events);
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
    const crystalSilent = crystalSilentNow(s);
    if (isOptical(s.mode) && opticalSilent) s = alert(s, events, 'optical-lost', ALERTS['optical-lost'].sentence);
    if (crystalSilent && !s.crystalAlerted) s = alert({ ...s, crystalAlerted: true }, events, 'crystal-lost', ALERTS['crystal-lost'].sentence);
    const wanted = wantedMode(ctx, s, plan, opticalSilent, crystalSilent);
    if (wanted !== s.mode) s = changeMode(s, events, wanted, wanted === plan.cut ? 'mode-restored' : wanted === 'crystal' ? 'crystal-fallback' : 'time-fallback');
    if (s.mode === 'crystal' && !opticalSilent && !s.optical.backTooLateSaid && s.nowS - s.optical.since >= opts.recoverS && monitorBackTooLate(ctx, s, plan)) {
      s = alertBackTooLate(s, events, plan);
    }
    const now = layerNow(s, crystalSilent);

    if (!s.rateAlerted && !crystalSilent && elapsed > 3 * opts.rateSmoothingS && Number.isFinite(s.crystal.rateNmPerS)) {
      const off = Math.abs(s.crystal.rateNmPerS / layer.rateNmPerS - 1) * 100;
      if (off > layer.rateBandPercent) {
        s = alert({ ...s, rateAlerted: true }, events, 'rate-out-of-band', `Rate ${s.crystal.rateNmPerS.toFixed(3)} nm/s is ${off.toFixed(0)} % off the planned ${layer.rateNmPerS} nm/s.`);
      }
    }

    const forced = guardRails.decide(null, now);
    if (forced) {
      if (forced.alert) s = alert(s, events, forced.alert.code, forced.alert.message);
      return cut(s, events, forced);
    }

    if (!s.approachingSent) {
      const expectedInS = (plan.targetNm - now.thicknessNm) / now.rateNmPerS - layer.shutterDelayS;
      if (expectedInS <= opts.approachingS) {
        events.push({ type: 'approaching-cut', timeS: s.nowS, layer: layer.number, expectedInS: Math.max(0, expectedInS) });
        s = { ...s, approachingSent: true };
      }
    }

    // The fit's clock has stopped: the plain rule of the layer's mode carries on.
    if (s.fit && isOptical(s.mode) && s.fit.clock === 'crystal' && crystalSilent) s = { ...s, fit: null };
    const verdict = layerRule(s).decide(now);
    return verdict ? cut(s, events, verdict) : s;
  }

  function cut(s: ControllerState, events: RunEvent[], c: Cut): ControllerState {
    const layer = layerRecipe(s);
    events.push({ type: 'cut', timeS: s.nowS, layer: layer.number, reason: c.reason, estimatedNm: c.estimatedNm, delayAllowanceNm: c.delayAllowanceNm, signal: s.optical.value });
    s = sendShutter(s, events, 'close', layer.materialName, layer.number, s.nowS);
    return { ...s, phase: 'closing', cutAtS: s.nowS, achievedNm: [...s.achievedNm, c.recordedNm] };
  }

  function finishLayer(s: ControllerState, events: RunEvent[], skipped: boolean): ControllerState {
    const layer = layerRecipe(s);
    const fitted = enterLayerFit(ctx, s, skipped);
    const record = fitted.record;
    s = fitted.state;
    // A crystal set aside or silent at the layer's end did not see all of it: its record is
    // unknown, and the crystal's next reading becomes its reference (estimators/crystal.ts).
    const followed = s.crystal.distrustLayer !== s.index && s.nowS - s.lastCrystalS < opts.staleAfterS;
    const crystalNm = !followed ? Number.NaN : Number.isFinite(s.layerCrystalNm) ? s.layerCrystalNm : 0;
    const crystalBelow = [...s.crystalBelow, { thicknessNm: crystalNm, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio }];
    // The crystal in use carries only what grew on it.
    const unit = s.crystalUnit;
    const onUnitNm = Math.max(0, crystalNm - (unit.layer === s.index ? unit.carriedNm : 0));
    const crystalUnit = followed ? { ...unit, stack: [...unit.stack, { thicknessNm: onUnitNm, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio }] } : UNKNOWN_CRYSTAL;
    s = { ...s, crystalBelow, crystalUnit };
    if (record) s = refitRecords(ctx, { ...s, chipRecords: [...s.chipRecords, record].slice(-REFIT_LAYERS) });
    const materialAfter = [...s.materialAfter];
    materialAfter[s.index] = { rate: s.materialRate, index: s.materialIndex };
    s = { ...s, materialAfter };
    const resolved = resolvedStack(recipe, s);
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
    if (compensation && recipe.design.band && s.index + 1 < recipe.layers.length) next = compensateRest(recipe, next, events);
    if (opts.replan || compensation) {
      const stack = resolvedStack(recipe, next);
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

  function startLayer(s: ControllerState, events: RunEvent[]): ControllerState {
    const layer = layerRecipe(s);
    const plan = layerPlan(s);
    events.push({ type: 'layer-started', timeS: s.nowS, layer: layer.number, material: layer.materialName, cut: plan.cut, targetNm: plan.targetNm });
    events.push({ type: 'shutter', timeS: s.nowS, command: shutter('open', layer.materialName, layer.number, s.nowS) });
    // Not yet heard counts as alive, as for the silence guard (the first reading may come just after the opening).
    const crystalAlive = Number.isNaN(s.lastCrystalS) || s.nowS - s.lastCrystalS < opts.staleAfterS;
    // A new chip starts a new refit, its priors what the earlier chips showed.
    const recorded = s.chipRecords[0];
    if (recorded && (recipe.layers[recorded.index] as RecipeLayer).chip !== layer.chip) s = { ...s, chipRecords: [] };
    // Layers cut on the crystal are watched by the fit too: the chip model of the later layers takes their optical thickness from it.
    const fitted = opts.estimator === 'fit' && plan.cut !== 'time' && (plan.cut !== 'crystal' || crystalAlive);
    return {
      ...s,
      phase: 'depositing',
      mode: plan.cut,
      openedAtS: s.nowS,
      cutAtS: Number.NaN,
      optical: freshOptical(plan),
      turns: turnDetectorFor(plan),
      crystal: { ...s.crystal, partNm: Number.NaN, rateNmPerS: Number.NaN },
      approachingSent: false,
      rateAlerted: false,
      crystalAlerted: false,
      layerCrystalNm: Number.NaN,
      fit: fitted ? startFit({ recipe, index: s.index, plan, stack: resolvedStack(recipe, s), materialIndex: s.materialIndex, materialRate: s.materialRate, noise: fitNoise(noise, s.monitorNoise), indexSigma: opts.indexSigma }, crystalAlive ? 'crystal' : 'time') : null,
    };
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
        next = cut(next, events, operatorCutRule.decide(null, layerNow(next, crystalSilentNow(next))));
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
    const bridged = code === 'mode-restored' && fitBridges(s.fit, s.mode, to) ? ' (the model fit takes it on with the readings from both sides of the gap, bridged by the crystal)' : '';
    return alert({ ...s, mode: to }, events, code, `${ALERTS[code].sentence}${bridged}`);
  }

  /** The monitor answering again with too little of its layer left: said once per run of readings, with the figures. */
  function alertBackTooLate(s: ControllerState, events: RunEvent[], plan: LayerPlan): ControllerState {
    const left = leftToCrystal(layerRecipe(s), plan, s.fit as NonNullable<ControllerState['fit']>, s, s.nowS, recipe.crystal.toolingSigmaPercent);
    s = { ...s, optical: { ...s.optical, backTooLateSaid: true } };
    return alert(s, events, 'optical-back-late', `${ALERTS['optical-back-late'].sentence} (${left.leftNm.toFixed(1)} nm left, under ${left.floorNm.toFixed(1)} nm)`);
  }

  return { recipe, options: opts, initial, step, estimate };
}

/**
 * The model fit's view of the layer in progress at run time t, for display: its thickness on the
 * parts at the design index (what the cut compares with the target) and its rms, nm; null when
 * no fit runs (the plain rules, a layer the fit does not watch, a silent crystal).
 */
export function liveFitEstimate(recipe: ResolvedRecipe, s: ControllerState, timeS: number): { thicknessNm: number; sigmaNm: number } | null {
  if (!s.fit || !isGrowing(s)) return null;
  return fitEstimateAt(layerRecipeOf(recipe, s), s.fit, s, timeS);
}

function shutter(action: 'open' | 'close', source: string, layer: number, timeS: number): ShutterCommand {
  return { kind: 'shutter', action, source, layer, timeS };
}
