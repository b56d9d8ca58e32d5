/**
 * The crystal estimator: the layer's part thickness and rate from the quartz crystal's
 * frequency (the exact acoustic model over the crystal's own stack, times the tooling factor),
 * which every rule sees as the layer's growth (`LayerNow.thicknessNm`). It judges each reading's
 * plausibility first: SUSPECT_READINGS implausible ones in a row are the instrument's, a fresh
 * crystal (bridged) or a crystal set aside for the layer (it then counts as silent and the
 * fallbacks act).
 */
import { sauerbreySensitivity, stackThicknessNm } from '../../model/crystal/index.ts';
import { ALERTS } from '../codes.ts';
import { alert, fault } from '../alerts.ts';
import type { ControllerContext } from '../controller-options.ts';
import { isGrowing, layerRecipeOf, SUSPECT_READINGS, withReading, type ControllerState, type CrystalSuspect } from '../controller-state.ts';
import type { RunEvent } from '../events.ts';
import type { Reading } from '../types.ts';

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

/** The state after a crystal reading. */
export function readCrystal(ctx: ControllerContext, s: ControllerState, r: Reading, events: RunEvent[]): ControllerState {
  const { recipe, opts } = ctx;
  let c = s.crystal;
  const inRun = isGrowing(s) || s.phase === 'holding';
  // The first reading after a resume may show all that grew while the run was down: no step to judge, no rate to take from it.
  const acrossResume = c.lastS <= s.resumedAtS;
  if (inRun && Number.isFinite(c.frequencyHz) && !acrossResume) {
    if (c.distrustLayer === s.index) return withReading(s, r.timeS, s.lastOpticalS, s.lastCrystalS, s.optical, s.turns, c, s.layerCrystalNm);
    if (!crystalStepPlausible(ctx, s, c.frequencyHz, c.lastS, r.value, r.timeS)) {
      s = crystalSuspect(ctx, s, events, r);
      if (s.crystal.suspect !== null || s.crystal.distrustLayer === s.index) return s;
      // A fresh crystal, recognised: this reading is its first used.
      c = s.crystal;
    }
  }
  const since = Number.isNaN(c.since) || !(r.timeS - c.lastS < opts.staleAfterS) ? r.timeS : c.since;
  if (!isGrowing(s)) {
    const crystal = { lastS: r.timeS, frequencyHz: r.value, partNm: c.partNm, rateNmPerS: c.rateNmPerS, since, suspect: null, distrustLayer: c.distrustLayer };
    return withReading(s, r.timeS, s.lastOpticalS, r.timeS, s.optical, s.turns, crystal, s.layerCrystalNm);
  }
  const layer = layerRecipeOf(recipe, s);
  if (Number.isNaN(s.crystalUnit.referenceHz)) s = crystalReference(ctx, s, r);
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
  return withReading(s, r.timeS, s.lastOpticalS, r.timeS, s.optical, s.turns, crystal, crystalNm);
}

/**
 * The crystal's stack is unknown (it did not see a whole layer): this reading is its reference,
 * as though a fresh crystal (the usual folding of the layers below into the reference, good to
 * the Z-match's correction of them), and what the layer grew before it is bridged at the
 * planned rate.
 */
function crystalReference(ctx: ControllerContext, s: ControllerState, r: Reading): ControllerState {
  const layer = layerRecipeOf(ctx.recipe, s);
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
function crystalStepPlausible(ctx: ControllerContext, s: ControllerState, fromHz: number, fromS: number, toHz: number, toS: number): boolean {
  const layer = layerRecipeOf(ctx.recipe, s);
  const slackHz = 10 * ctx.recipe.crystal.noiseHz + CRYSTAL_RISE_HZ;
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
function crystalSuspect(ctx: ControllerContext, s: ControllerState, events: RunEvent[], r: Reading): ControllerState {
  const f0 = ctx.recipe.crystal.bareFrequencyHz;
  const c = s.crystal;
  const p = c.suspect;
  const fresh = Math.abs(r.value - f0) <= FRESH_CRYSTAL_BAND * f0 && r.value > c.frequencyHz;
  const steady = p !== null && crystalStepPlausible(ctx, s, p.lastHz, p.lastS, r.value, r.timeS);
  const suspect: CrystalSuspect = steady
    ? { count: p.count + 1, firstHz: p.firstHz, firstS: p.firstS, lastHz: r.value, lastS: r.timeS, fresh: p.fresh && fresh }
    : { count: 1, firstHz: r.value, firstS: r.timeS, lastHz: r.value, lastS: r.timeS, fresh };
  s = fault(ctx.recipe, { ...s, nowS: r.timeS }, events, 'implausible-jump', `crystal ${r.value} Hz at ${r.timeS} s`);
  if (suspect.count < SUSPECT_READINGS) return { ...s, crystal: { ...c, suspect } };
  if (suspect.fresh) return crystalChanged(ctx, s, events, suspect);
  s = { ...s, crystalAlerted: true, crystal: { ...c, suspect: null, distrustLayer: s.index } };
  return alert(ctx.recipe, s, events, 'crystal-implausible', ALERTS['crystal-implausible'].sentence);
}

/**
 * A fresh crystal came into use: it is the reference from its first reading on, its stack
 * empty; the layer growing carries what it had grown, bridged at its rate from the old
 * crystal's last reading to the new one's first, so its thickness, rate, arming and the fit's
 * clock carry on.
 */
function crystalChanged(ctx: ControllerContext, s: ControllerState, events: RunEvent[], suspect: CrystalSuspect): ControllerState {
  const c = s.crystal;
  const layer = layerRecipeOf(ctx.recipe, s);
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
  return alert(ctx.recipe, s, events, 'crystal-changed', `${ALERTS['crystal-changed'].sentence} (${suspect.firstHz.toFixed(0)} Hz)`);
}
