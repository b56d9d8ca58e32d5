/**
 * A simulator profile of the chamber as the calibration and the journals found it: the hidden
 * factors (chip ratio, tooling, film index) from the fit, and the process as the runs recorded
 * it — each source's rate against the recipe's, its ramp after the shutter opens and its
 * fluctuation (from the crystal's growth curve of every layer, scaled to the calibrated part
 * thickness), the shutters' delays and jitter (from their acknowledgements), the monitor's noise
 * and drifts, the crystal's noise. What the runs cannot show (the crystal's heat load, spikes,
 * dropouts) stays the typical profile's.
 */
import { SimProfileSchema, type SimProfile } from '../../sim/index.ts';
import type { CalibrationResult } from './calibration-fit.ts';
import type { RunData } from './run-data.ts';

/** Ramp time constants tried, s (the profile allows up to 600; a few seconds is usual). */
const RAMP_GRID_S = Array.from({ length: 301 }, (_, i) => i * 0.1);
/** Rate windows for the fluctuation, in the growth curve's 1 s bins. */
const RATE_WINDOW_BINS = 5;

/** One source's process, estimated; fields are absent where the runs show nothing of them. */
export interface SourceProcess {
  rateBiasPercent?: number;
  rampTimeConstantS?: number;
  fluctuationPercent?: number;
  fluctuationCorrelationS?: number;
  shutterDelayS?: number;
  shutterJitterS?: number;
}

/**
 * The profile as a plain object (what `--profile-out` writes and calibration.json keeps), checked
 * against the schema, or a sentence saying why the chamber found lies outside what the virtual
 * chamber models. Errors are against the first run's recipe: `rebaseProfile` moves them onto
 * another recipe.
 */
export function chamberProfile(result: CalibrationResult, runs: readonly RunData[]): { profile: Record<string, unknown> } | { problem: string } {
  const sources: Record<string, unknown> = { default: { driftPercentPerHour: 0 } };
  const materials: Record<string, unknown> = { default: { indexScatterPercent: 0 } };
  for (const [name, m] of Object.entries(result.materials)) {
    sources[name] = {
      ...estimateSourceProcess(name, result, runs),
      chipRatioErrorPercent: round(100 * (m.chipRatio.value / m.recipeChipRatio - 1)),
      toolingErrorPercent: round(100 * (m.toolingFactor.value / m.recipeToolingFactor - 1)),
    };
    materials[name] = { indexOffsetPercent: round(100 * (m.indexFactor.value - 1)), indexScatterPercent: 0 };
  }
  const mean = (values: readonly number[]): number => values.reduce((s, v) => s + v, 0) / Math.max(1, values.length);
  const profile = {
    formatVersion: 1,
    name: `calibrated from ${runs.map((r) => r.label).join(', ')}`,
    description:
      'chip ratios, tooling factors and film indices from fringe calibrate; rates, ramps, fluctuation, shutter delays, monitor noise and drifts and crystal noise from the journals; the rate drift is folded into the rate, and the crystal heat load, spikes and dropouts are the typical profile\'s',
    sources,
    materials,
    optical: {
      noisePercent: round(100 * mean(runs.map((r) => r.opticalNoise))),
      gainDriftPercentPerHour: round(clamp(100 * mean(result.monitorDrifts.map((d) => d.gainPerHour)), -100, 100)),
      offsetDriftPercentPerHour: round(clamp(100 * mean(result.monitorDrifts.map((d) => d.offsetPerHour)), -100, 100)),
    },
    crystal: { noiseHz: round(mean(runs.map((r) => r.crystalNoiseHz))) },
  };
  // A file fringe writes must load; a chamber beyond the simulator's ranges is said so, not clamped.
  const checked = SimProfileSchema.safeParse(profile);
  if (!checked.success) {
    const issue = checked.error.issues[0];
    return { problem: `the calibrated chamber lies outside what the virtual chamber models (${issue ? `${issue.path.join('.')}: ${issue.message}` : 'invalid'}), so no simulator profile was made` };
  }
  return { profile };
}

/**
 * The source `name`'s process from every run's layers of it. The rate on the parts along a
 * layer is its calibrated thickness times the crystal's growth fraction; it is fitted as
 * A·(s − τ(1 − e^{−s/τ})) + c, s the time since the opening (the integral of the virtual
 * chamber's ramped rate, sim/source-rate.ts), A per layer, τ on a grid shared by the material's
 * layers. The bias is the mean A over the recipe's rate; the fluctuation the rms of the rate in
 * 5 s windows about the material's mean (past the ramp), its correlation time from the windows'
 * lag-one autocorrelation.
 */
export function estimateSourceProcess(name: string, result: CalibrationResult, runs: readonly RunData[]): SourceProcess {
  const out: SourceProcess = {};
  const curves: { s: Float64Array; nm: Float64Array; rate: number }[] = [];
  runs.forEach((run, r) => {
    for (const layer of run.layers) {
      const recipeLayer = run.recipe.layers[layer.index];
      if (recipeLayer?.materialName !== name || layer.growth.timesS.length < 8) continue;
      const part = result.layers.find((l) => l.run === r && l.number === layer.index + 1)?.partNm;
      if (part === undefined || !(part > 0)) continue;
      curves.push({
        s: Float64Array.from(layer.growth.timesS, (t) => t - layer.openS),
        nm: Float64Array.from(layer.growth.fractions, (u) => u * part),
        rate: recipeLayer.rateNmPerS,
      });
    }
  });
  if (curves.length > 0) {
    let best = { ssr: Number.POSITIVE_INFINITY, tau: 0, levels: [] as number[] };
    for (const tau of RAMP_GRID_S) {
      let ssr = 0;
      const levels: number[] = [];
      for (const c of curves) {
        const fit = fitLevel(c.s, c.nm, tau);
        ssr += fit.ssr;
        levels.push(fit.level / c.rate);
      }
      if (ssr < best.ssr) best = { ssr, tau, levels };
    }
    const level = best.levels.reduce((s, v) => s + v, 0) / best.levels.length;
    out.rateBiasPercent = round(clamp(100 * (level - 1), -50, 100));
    out.rampTimeConstantS = round(best.tau);
    // Windows of the rate past the ramp (3τ), relative to the material's mean level.
    const deviations: number[][] = curves.map((c) => {
      const devs: number[] = [];
      for (let i = 0; i + RATE_WINDOW_BINS < c.s.length; i += RATE_WINDOW_BINS) {
        const a = c.s[i] as number;
        const b = c.s[i + RATE_WINDOW_BINS] as number;
        if (a < 3 * best.tau || b <= a) continue;
        const measured = ((c.nm[i + RATE_WINDOW_BINS] as number) - (c.nm[i] as number)) / (b - a);
        const model = (level * c.rate * (ramped(b, best.tau) - ramped(a, best.tau))) / (b - a);
        devs.push(measured / model - 1);
      }
      return devs;
    });
    const all = deviations.flat();
    if (all.length >= 4) {
      out.fluctuationPercent = round(clamp(100 * Math.sqrt(all.reduce((s, d) => s + d * d, 0) / all.length), 0, 20));
      let num = 0;
      let den = 0;
      for (const devs of deviations) {
        for (let i = 0; i + 1 < devs.length; i++) num += (devs[i] as number) * (devs[i + 1] as number);
        for (const d of devs) den += d * d;
      }
      const rho = den > 0 ? num / den : 0;
      // ρ = e^{−Δ/τc} for an Ornstein–Uhlenbeck process sampled every Δ (derived).
      const windowS = RATE_WINDOW_BINS;
      out.fluctuationCorrelationS = round(rho > 0 && rho < 1 ? clamp(-windowS / Math.log(rho), 1, 600) : 1);
    }
  }
  const delays = runs.flatMap((run) => run.shutterDelaysS[name] ?? []).filter(Number.isFinite);
  if (delays.length > 0) {
    const median = medianOf(delays);
    out.shutterDelayS = round(clamp(median, 0, 10));
    // 1.4826 × the median absolute deviation estimates σ of a Gaussian, robust to a stray pair.
    out.shutterJitterS = round(clamp(1.4826 * medianOf(delays.map((d) => Math.abs(d - median))), 0, 1));
  }
  return out;
}

/**
 * The profile with its chip-ratio and tooling errors moved onto `recipe`'s factors: the chamber
 * stays the one calibrated (its absolute chip ratio and tooling factor) whatever the recipe
 * now assumes.
 */
export function rebaseProfile(
  profile: SimProfile,
  factors: Readonly<Record<string, { chipRatio: number; toolingFactor: number }>>,
  recipe: { layers: readonly { materialName: string; chipRatio: number; toolingFactor: number }[] },
): SimProfile {
  const sources: Record<string, unknown> = { ...profile.sources };
  for (const [name, f] of Object.entries(factors)) {
    const first = recipe.layers.find((l) => l.materialName === name);
    if (!first) continue;
    sources[name] = {
      ...(profile.sources[name] ?? {}),
      chipRatioErrorPercent: round(100 * (f.chipRatio / first.chipRatio - 1)),
      toolingErrorPercent: round(100 * (f.toolingFactor / first.toolingFactor - 1)),
    };
  }
  return SimProfileSchema.parse({ ...profile, sources });
}

/** ∫₀ˢ (1 − e^{−x/τ}) dx. */
function ramped(s: number, tau: number): number {
  return tau > 0 ? s - tau * (1 - Math.exp(-s / tau)) : s;
}

/** Least squares of nm ≈ level·ramped(s, τ) + c. */
function fitLevel(s: Float64Array, nm: Float64Array, tau: number): { level: number; ssr: number } {
  const n = s.length;
  let sx = 0;
  let sy = 0;
  let sxx = 0;
  let sxy = 0;
  for (let i = 0; i < n; i++) {
    const x = ramped(s[i] as number, tau);
    const y = nm[i] as number;
    sx += x;
    sy += y;
    sxx += x * x;
    sxy += x * y;
  }
  const det = n * sxx - sx * sx;
  const level = det > 0 ? (n * sxy - sx * sy) / det : 0;
  const c = (sy - level * sx) / n;
  let ssr = 0;
  for (let i = 0; i < n; i++) ssr += ((nm[i] as number) - level * ramped(s[i] as number, tau) - c) ** 2;
  return { level, ssr };
}

function medianOf(values: readonly number[]): number {
  const sorted = [...values].sort((a, b) => a - b);
  const mid = sorted.length >> 1;
  return sorted.length % 2 ? (sorted[mid] as number) : 0.5 * ((sorted[mid - 1] as number) + (sorted[mid] as number));
}

function clamp(x: number, lo: number, hi: number): number {
  return Number.isFinite(x) ? Math.min(hi, Math.max(lo, x)) : 0;
}

function round(x: number): number {
  return Math.round(x * 1e5) / 1e5;
}
