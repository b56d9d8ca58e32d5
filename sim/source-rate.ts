/**
 * The true deposition rate of one source on the parts, and its exact integral.
 *
 * rate(t) = R·(1 + b)·(1 − e^{−(t − t_open)/τ_r})·(1 + x(t) + D·t), where R is the recipe's rate,
 * b the bias, τ_r the ramp after the latest opening, D the drift per second of run time, and
 * x(t) the fluctuation: an Ornstein–Uhlenbeck process (rms σ, correlation time τ) sampled by its
 * exact update on a fixed grid t_i = i·h from t = 0, h = min(0.1 s, τ/20), and taken linear
 * between grid points. Because the grid is fixed, the rate a source delivers at a given time is
 * the same whatever the controller does and whenever it is asked.
 *
 * Linear interpolation lowers the variance between grid points a little: at mid-step it is
 * σ²(1 + e^{−h/τ})/2 ≥ 0.975 σ² for h ≤ τ/20 (derived); at grid points it is exact.
 *
 * Integration is exact for this rate: between grid points (1 + x + D·t) is linear, g(t), and
 * ∫(1 − e^{−u/τ_r})·g = ∫g − τ_r[E_a(g_a + βτ_r) − E_b(g_b + βτ_r)], β = g′, E = e^{−u/τ_r}
 * (integration by parts), so the thickness carries only rounding error (≈ 1e-16 relative per
 * step; summed over 10⁶ steps, ≲ 1e-10 relative).
 */
import { OrnsteinUhlenbeck, type RandomStream } from './random.ts';

export interface SourceRateSettings {
  /** The recipe's rate on the parts, nm/s. */
  readonly plannedRateNmPerS: number;
  readonly rateBiasPercent: number;
  readonly rampTimeConstantS: number;
  readonly fluctuationPercent: number;
  readonly fluctuationCorrelationS: number;
  readonly driftPercentPerHour: number;
}

/** Grid of the fluctuation, s: at most 0.1 s and a twentieth of the correlation time. */
export function fluctuationGridS(correlationS: number): number {
  return Math.min(0.1, correlationS / 20);
}

/**
 * One source's rate. Queries must move forward in time: `integrate(a, b)` and `rateAt(t)` may
 * not reach back before the grid step of an earlier query (the chamber only moves forward);
 * one that does throws a RangeError.
 */
export class SourceRate {
  private readonly scale: number;
  private readonly rampS: number;
  private readonly driftPerS: number;
  private readonly gridS: number;
  private readonly ou: OrnsteinUhlenbeck | undefined;
  /** Grid index i of the current segment [t_i, t_{i+1}], and x at both ends. */
  private index = 0;
  private x0 = 0;
  private x1 = 0;
  private openS = 0;

  constructor(settings: SourceRateSettings, stream: RandomStream) {
    this.scale = settings.plannedRateNmPerS * (1 + settings.rateBiasPercent / 100);
    this.rampS = settings.rampTimeConstantS;
    this.driftPerS = settings.driftPercentPerHour / 100 / 3600;
    this.gridS = fluctuationGridS(settings.fluctuationCorrelationS);
    const sigma = settings.fluctuationPercent / 100;
    if (sigma > 0) {
      this.ou = new OrnsteinUhlenbeck(stream, sigma, settings.fluctuationCorrelationS);
      this.x0 = this.ou.value;
      this.x1 = this.ou.step(this.gridS);
    }
  }

  /** The shutter opened at `timeS`: the ramp starts again from there. */
  open(timeS: number): void {
    this.openS = timeS;
  }

  /** The fluctuation x(t) (fraction of the rate). */
  fluctuationAt(timeS: number): number {
    if (this.ou === undefined) return 0;
    this.seek(timeS);
    const t0 = this.index * this.gridS;
    const w = (timeS - t0) / this.gridS;
    return this.x0 + (this.x1 - this.x0) * w;
  }

  /** The true rate on the parts at `timeS` (shutter open since the last {@link open}), nm/s. */
  rateAt(timeS: number): number {
    const ramp = this.rampS > 0 ? -Math.expm1(-(timeS - this.openS) / this.rampS) : 1;
    return this.scale * ramp * (1 + this.fluctuationAt(timeS) + this.driftPerS * timeS);
  }

  /** ∫ rate dt from `fromS` to `toS` (fromS ≤ toS, both after the last opening): nm on the parts. */
  integrate(fromS: number, toS: number): number {
    if (!(toS > fromS)) return 0;
    if (this.ou === undefined) return this.scale * this.segment(fromS, toS, 0, 0);
    let sum = 0;
    let a = fromS;
    while (a < toS) {
      this.seek(a);
      const t0 = this.index * this.gridS;
      const t1 = (this.index + 1) * this.gridS;
      const b = t1 < toS ? t1 : toS;
      const slope = (this.x1 - this.x0) / this.gridS;
      const xa = this.x0 + slope * (a - t0);
      const xb = this.x0 + slope * (b - t0);
      sum += this.segment(a, b, xa, xb);
      a = b;
    }
    return this.scale * sum;
  }

  /** ∫_a^b ramp(t)·(1 + x + D t) dt with x linear from xa to xb (see the module notes). */
  private segment(a: number, b: number, xa: number, xb: number): number {
    const h = b - a;
    const ga = 1 + xa + this.driftPerS * a;
    const gb = 1 + xb + this.driftPerS * b;
    const plain = 0.5 * h * (ga + gb);
    const tau = this.rampS;
    if (tau === 0) return plain;
    const beta = (gb - ga) / h;
    const ea = Math.exp(-(a - this.openS) / tau);
    const eb = Math.exp(-(b - this.openS) / tau);
    // τ[E_a(g_a + βτ) − E_b(g_b + βτ)] = τ[(E_a − E_b)(g_a + βτ) − E_b(g_b − g_a)], E_a − E_b = −E_a·expm1(−h/τ)
    const decayed = tau * (-ea * Math.expm1(-h / tau) * (ga + beta * tau) - eb * (gb - ga));
    return plain - decayed;
  }

  /** Moves the current grid segment forward to the one holding `timeS`. */
  private seek(timeS: number): void {
    const ou = this.ou as OrnsteinUhlenbeck;
    if (timeS < this.index * this.gridS) throw new RangeError(`the rate was already asked about ${this.index * this.gridS} s; ${timeS} s is before it`);
    while ((this.index + 1) * this.gridS <= timeS) {
      this.index++;
      this.x0 = this.x1;
      this.x1 = ou.step(this.gridS);
    }
  }
}
