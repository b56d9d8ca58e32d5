/**
 * The optical monitor's channel: each reading judged plausible (no chip moves its signal by
 * twice its layer's whole curve in one reading; SUSPECT_READINGS that agree are the signal's new
 * level, erratic ones set the monitor aside for the layer), then fed to the layer's estimators:
 * the model fit while the layer may grow, the plain rules' turn detector while it deposits.
 */
import { alert, fault } from './alerts.ts';
import { ALERTS } from './codes.ts';
import type { ControllerContext } from './controller-options.ts';
import { isGrowing, layerPlanOf, layerRecipeOf, SUSPECT_READINGS, withReading, type ControllerState, type OpticalTrack } from './controller-state.ts';
import { fitClockAt, readFit } from './estimators/model-fit.ts';
import { readTurns } from './estimators/turn-detector.ts';
import type { RunEvent } from './events.ts';
import type { Reading } from './types.ts';

/**
 * An optical reading may not jump from the last one by more than twice the layer's whole planned
 * curve range (0–120 % of the target) and 20σ: no chip does that in one reading. Any reading
 * must lie within half the full scale beyond 0..1 (no transmittance or reflectance does).
 */
const OPTICAL_JUMP_SIGMAS = 20;
/** Nor by less than a tenth of full scale: a monitor that noisy would be of no use at all. */
const OPTICAL_JUMP_FLOOR = 0.1;
const OPTICAL_SIGNAL_ALLOWANCE = 0.5;

/** An optical reading: judged plausible, then fed to the layer's estimators (the fit, the turn detector). */
export function readOptical(ctx: ControllerContext, s: ControllerState, r: Reading, events: RunEvent[]): ControllerState {
  const { recipe, opts, noise } = ctx;
  const o = s.optical;
  const growing = isGrowing(s);
  if (growing && o.distrusted) return withReading(s, r.timeS, s.lastOpticalS, s.lastCrystalS, o, s.turns, s.crystal, s.layerCrystalNm);
  if (growing) {
    // Plausibility: no chip moves its signal by twice its layer's whole curve in one reading.
    // In a layer's first second, or the first after a gap, the last reading is no reference (a
    // monitor changing wavelength, a signal moving through the gap): a reading there only has
    // to be a signal at all. Five readings that agree take over from a wrong reference.
    const limit = Math.max(OPTICAL_JUMP_SIGMAS * noise, o.jumpLimit, OPTICAL_JUMP_FLOOR);
    const settled = r.timeS - o.since >= opts.recoverS;
    const noSignal = Math.abs(r.value - 0.5) > 0.5 + OPTICAL_SIGNAL_ALLOWANCE;
    if (noSignal || (settled && Math.abs(r.value - o.value) > limit)) {
      s = opticalSuspect(ctx, s, events, r, limit, noSignal);
      // Readings that agree among themselves are the signal's level (the reference was the wrong one).
      if (s.optical.suspects < SUSPECT_READINGS || s.optical.distrusted) return s;
    }
  }
  // Across a resume the fit's clock waits for the crystal's first reading: what grew meanwhile is in it.
  if (s.fit && growing && !(s.fit.clock === 'crystal' && s.crystal.lastS <= s.resumedAtS)) {
    readFit(s.fit, fitClockAt(layerRecipeOf(recipe, s), s.fit, s, r.timeS), r.value);
  }
  if (s.phase !== 'depositing') return withReading(s, r.timeS, r.timeS, s.lastCrystalS, s.optical, s.turns, s.crystal, s.layerCrystalNm);
  // A gap resets the run of readings the monitor needs before it takes its layer back.
  const lastS = Number.isNaN(s.lastOpticalS) ? s.openedAtS : Math.max(s.lastOpticalS, s.openedAtS);
  const unbroken = !Number.isNaN(o.since) && r.timeS - lastS < opts.staleAfterS;
  const optical: OpticalTrack = {
    value: r.value,
    since: unbroken ? o.since : r.timeS,
    gapFromS: unbroken ? o.gapFromS : lastS,
    jumpLimit: o.jumpLimit,
    suspects: 0,
    suspectValue: Number.NaN,
    erratic: false,
    distrusted: false,
    backTooLateSaid: unbroken && o.backTooLateSaid,
  };
  const turns = readTurns(s.turns, layerPlanOf(s), r.timeS, r.value, opts.turnSmoothingS);
  return withReading(s, r.timeS, r.timeS, s.lastCrystalS, optical, turns, s.crystal, s.layerCrystalNm);
}

/**
 * An implausible optical reading: a fault, not used. The SUSPECT_READINGSth in a row is used if
 * they all agree and are signals at all (the caller goes on with it); else the monitor is set
 * aside for the layer.
 */
function opticalSuspect(ctx: ControllerContext, s: ControllerState, events: RunEvent[], r: Reading, limit: number, noSignal: boolean): ControllerState {
  const o = s.optical;
  const suspects = o.suspects + 1;
  const erratic = noSignal || (o.suspects > 0 && (o.erratic || Math.abs(r.value - o.suspectValue) > limit));
  if (suspects >= SUSPECT_READINGS && !erratic) return { ...s, optical: { ...o, suspects } };
  s = fault(ctx.recipe, { ...s, nowS: r.timeS }, events, 'implausible-jump', `optical ${r.value} at ${r.timeS} s`);
  if (s.phase !== 'depositing') return s;
  if (suspects < SUSPECT_READINGS) return { ...s, optical: { ...o, suspects, suspectValue: r.value, erratic } };
  s = { ...s, optical: { ...o, suspects: 0, suspectValue: Number.NaN, erratic: false, distrusted: true } };
  return alert(ctx.recipe, s, events, 'optical-implausible', ALERTS['optical-implausible'].sentence);
}

