/**
 * A deliberately simple chamber for the controller's unit tests: exact planned rates, the plan's
 * own monitor curve and crystal model, optional white noise, and knobs to silence a channel.
 * (The physically modelled chamber lives in sim/; this one keeps the reducer's tests free of it.)
 */
import { stackFrequencyHz, type CrystalLayer } from '../../src/model/crystal/index.ts';
import type { ChipMonitor } from '../../src/model/plan/chip-monitor.ts';
import { chipMonitorFor } from '../../src/model/plan/plan.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import type { Controller, ControllerState } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import type { PipelineInput } from '../../src/pipeline/types.ts';

export interface IdealRunOptions {
  /** rms noise of the optical signal (default 0). */
  noise?: number;
  /** True rate / planned rate (default 1), or that ratio as a function of run time. */
  rateFactor?: number | ((timeS: number) => number);
  sampleRateHz?: number;
  /** Optical readings stop in this window of run time. */
  opticalSilentS?: [number, number];
  /** Crystal readings stop in this window of run time. */
  crystalSilentS?: [number, number];
  /** Extra inputs to inject at given times (operator commands). */
  inject?: { atS: number; input: PipelineInput }[];
  /** Stop after this much run time (default: 3 × the planned duration). */
  maxS?: number;
  seed?: number;
  /** True index over the design's per material (default 1): the monitor shows the chip with these. */
  indexFactors?: Readonly<Record<string, number>>;
  /**
   * A fresh crystal of bare frequency `bareHz` comes into use at `atS` (a crystal changer's
   * turn): from then on the crystal carries only what grew after the change.
   */
  crystalChange?: { atS: number; bareHz: number };
}

export interface IdealRunResult {
  events: RunEvent[];
  state: ControllerState;
  /** True part thickness of every layer, nm. */
  trueNm: number[];
}

export function runIdeal(recipe: ResolvedRecipe, controller: Controller, options: IdealRunOptions = {}): IdealRunResult {
  const dt = 1 / (options.sampleRateHz ?? recipe.monitor.sampleRateHz);
  const factor = options.rateFactor ?? 1;
  const rateFactor = typeof factor === 'number' ? (): number => factor : factor;
  let seed = options.seed ?? 1;
  const gauss = (): number => {
    // Park–Miller minimal standard generator with Box–Muller (test noise only).
    seed = (seed * 16807) % 2147483647;
    const u = seed / 2147483647;
    seed = (seed * 16807) % 2147483647;
    const v = seed / 2147483647;
    return Math.sqrt(-2 * Math.log(u)) * Math.cos(2 * Math.PI * v);
  };
  const trueNm = recipe.layers.map(() => 0);
  const crystal: CrystalLayer[] = [];
  // After a crystal change: the fresh crystal's layers, and what the layer growing then had grown before it.
  let fresh: CrystalLayer[] | null = null;
  let freshOffsetNm = 0;
  let monitor: ChipMonitor | undefined;
  let current = -1;
  let openUntil = Number.POSITIVE_INFINITY; // time the shutter actually closes
  let open = false;
  let state = controller.initial();
  const events: RunEvent[] = [];
  const pending = [...(options.inject ?? [])].sort((a, b) => a.atS - b.atS);

  const apply = (input: PipelineInput): void => {
    const result = controller.step(state, input);
    state = result.state;
    for (const e of result.events) {
      events.push(e);
      if (e.type !== 'shutter') continue;
      const layer = recipe.layers[e.command.layer - 1];
      if (!layer) continue;
      if (e.command.action === 'open') {
        if (current !== e.command.layer - 1) {
          current = e.command.layer - 1;
          const factors = recipe.layers.map((l) => options.indexFactors?.[l.materialName] ?? 1);
          monitor = chipMonitorFor(recipe, current, trueNm, { indexFactors: factors, growingIndexFactor: factors[current] as number });
          crystal.push({ thicknessNm: 0, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio });
          fresh?.push({ thicknessNm: 0, densityGPerCm3: layer.densityGPerCm3, zRatio: layer.zRatio });
          freshOffsetNm = 0;
        }
        open = true;
        openUntil = Number.POSITIVE_INFINITY;
      } else if (e.command.layer - 1 === current) {
        openUntil = e.command.timeS + layer.shutterDelayS;
      }
    }
  };

  apply({ kind: 'operator', action: 'start', timeS: 0 });
  const plannedS = recipe.layers.reduce((sum, l) => sum + l.targetNm / l.rateNmPerS, 0);
  const maxS = options.maxS ?? 3 * plannedS;
  const silent = (w: [number, number] | undefined, t: number): boolean => w !== undefined && t >= w[0] && t < w[1];
  for (let k = 1; state.phase !== 'finished' && state.phase !== 'aborted' && k * dt <= maxS; k++) {
    const t = k * dt;
    while (pending.length > 0 && (pending[0] as { atS: number }).atS <= t) apply((pending.shift() as { input: PipelineInput }).input);
    if (open && current >= 0) {
      const layer = recipe.layers[current] as ResolvedRecipe['layers'][number];
      const growS = Math.max(0, Math.min(t, openUntil) - (t - dt));
      trueNm[current] = (trueNm[current] as number) + layer.rateNmPerS * rateFactor(t) * growS;
      (crystal[crystal.length - 1] as { thicknessNm: number }).thicknessNm = (trueNm[current] as number) / layer.toolingFactor;
      if (fresh) (fresh[fresh.length - 1] as { thicknessNm: number }).thicknessNm = (trueNm[current] as number) / layer.toolingFactor - freshOffsetNm;
      if (t >= openUntil) open = false;
    }
    const change = options.crystalChange;
    if (change && !fresh && t >= change.atS) {
      const top = crystal[crystal.length - 1];
      freshOffsetNm = top?.thicknessNm ?? 0;
      fresh = top ? [{ ...top, thicknessNm: 0 }] : [];
    }
    if (!silent(options.opticalSilentS, t) && monitor && current >= 0) {
      const chipNm = (trueNm[current] as number) * (recipe.layers[current] as { chipRatio: number }).chipRatio;
      const value = monitor.signalAt(chipNm) + (options.noise ?? 0) * gauss();
      apply({ kind: 'reading', channel: 'optical', value, timeS: t, arrivalS: t });
    }
    if (!silent(options.crystalSilentS, t)) {
      const value = fresh && options.crystalChange ? stackFrequencyHz(options.crystalChange.bareHz, fresh) : stackFrequencyHz(recipe.crystal.bareFrequencyHz, crystal);
      apply({ kind: 'reading', channel: 'crystal', value, timeS: t, arrivalS: t });
    } else {
      apply({ kind: 'tick', timeS: t });
    }
  }
  return { events, state, trueNm };
}
