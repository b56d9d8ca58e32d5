/**
 * What the plain rules' threshold turn detector can see of a planned layer: the signal step that
 * confirms a turn, and the turns before the cut that step can see. The controller's detector
 * (src/pipeline/estimators/turn-detector.ts) and the plan's prediction of the plain rules share it.
 */
import type { LayerPlan } from './plan.ts';

export interface TurnDetectorOptions {
  /** A turn is confirmed by a tenth of the layer's planned swing, kept between confirmMinSigma·σ and confirmSigma·σ. */
  readonly confirmSigma: number;
  readonly confirmMinSigma: number;
}

/** A tenth of the planned swing, kept between confirmMinSigma·σ and confirmSigma·σ (σ the monitor's noise). */
export function confirmStep(plan: LayerPlan | undefined, noise: number, options: TurnDetectorOptions): number {
  return Math.min(options.confirmSigma * noise, Math.max(options.confirmMinSigma * noise, 0.1 * (plan?.swing ?? 0)));
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
