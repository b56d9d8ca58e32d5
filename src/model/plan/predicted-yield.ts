/**
 * The yield a monitoring plan predicts: a Monte Carlo of the plan's own error model, each sampled
 * run's final stack judged against the design's tolerances (or, without tolerances, its
 * spectrum's deviation from the design's over the band).
 *
 * The error model, per layer, as the model fit cuts (the command line's default estimator):
 * - an optical cut (level or turning point) ends on the layer's optical thickness at the design
 *   index (the fit's u = κ·d), off by its stack figure (the layers below uncertain), drawn
 *   independently per layer: the chip refit pins each layer below from the layers above, so
 *   that a layer's error does not carry into the next cut (what the stack figure assumes);
 * - a crystal cut ends on the physical thickness, off by the crystal's figure (tooling and the
 *   reading) — unless the fits have calibrated its material on an earlier optical layer: then
 *   it is cut on the optical target, as precisely as those layers together pinned the rate;
 * - a timed cut: physical, off by the rate's prior.
 * The film's index is off by one factor per material and run: a known offset, a random part
 * common to every material (a process running hot or cold) and a part of its own (`ProcessSpread`). An optical cut makes
 * up for its index in n·d; a physical cut carries it.
 *
 * Two ways to evaluate: `predictYield` builds each sampled stack and computes its spectra
 * exactly; `LinearYieldModel` works on the spectra's first derivatives with common random numbers,
 * so that the search can compare thousands of variants of one plan at a few milliseconds each.
 */
import { scaledDispersion } from '../optics/dispersion.ts';
import { buildOpticalModel, spectrum, type StackSpec } from '../optics/optical-model.ts';
import { checkTolerances, toleranceGrid, toleranceSpectrum, wilsonInterval, type Tolerance } from '../design/tolerances.ts';
import type { RunPlan } from './plan.ts';
import type { ResolvedRecipe } from './recipe.ts';
import { DEFAULT_INDEX_SIGMA, INDEX_RUN_SIGMA } from './stack-precision.ts';

/** How the film indices of a run lie off the design's, fractions. */
export interface ProcessSpread {
  /** A known offset of every material's index (a chamber that runs its films dense, say). */
  indexOffset: number;
  /** rms of the part common to every material in a run. */
  indexCommonSigma: number;
  /** Each material's own part. */
  indexMaterialSigma: number;
}

/** The plan's own spread: the design's index trusted to DEFAULT_INDEX_SIGMA, each material on its own. */
export const PLAN_PROCESS_SPREAD: ProcessSpread = { indexOffset: 0, indexCommonSigma: 0, indexMaterialSigma: DEFAULT_INDEX_SIGMA };

/** One layer's error in the model: on its optical thickness (u) or its physical thickness, rms fraction of the target. */
export interface LayerError {
  on: 'optical' | 'physical';
  sigma: number;
}

/** Each layer's error as the plan predicts it (see the module's comment). */
export function layerErrors(plan: RunPlan): LayerError[] {
  const calibrations = new Map<string, number>();
  return plan.layers.map((l): LayerError => {
    if (l.cut === 'level' || l.cut === 'turning-point') {
      const sigma = l.stackPrecisionPercent / 100;
      // The material's rate on the crystal's clock: every fitted layer adds its information.
      calibrations.set(l.material, (calibrations.get(l.material) ?? 0) + 1 / sigma ** 2);
      return { on: 'optical', sigma };
    }
    const information = calibrations.get(l.material);
    // Calibrated: cut on the optical target, the rate as the fitted layers pinned it, no better
    // than a material holds from layer to layer (INDEX_RUN_SIGMA).
    if (l.cut === 'crystal' && information !== undefined) return { on: 'optical', sigma: Math.hypot(1 / Math.sqrt(information), INDEX_RUN_SIGMA) };
    return { on: 'physical', sigma: l.precisionPercent / 100 };
  });
}

/** What a prediction judges: the tolerances' worst margins, or the spectrum's deviation over the band. */
export interface Prediction {
  samples: number;
  /** % of sampled runs meeting every tolerance; null without tolerances. */
  yieldPercent: number | null;
  /** Mean over the sampled runs of the largest |ΔT| over the band (fraction); null without a band to judge. */
  meanMaxAbsT: number | null;
}

/** A small seeded generator of standard normal deviates (mulberry32, Box–Muller): the prediction is reproducible. */
export function createNormalStream(seed: number): () => number {
  let a = seed >>> 0;
  let spare = Number.NaN;
  const uniform = (): number => {
    a = (a + 0x6d2b79f5) >>> 0;
    let t = a;
    t = Math.imul(t ^ (t >>> 15), t | 1);
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61);
    return (((t ^ (t >>> 14)) >>> 0) + 0.5) / 4294967296;
  };
  return () => {
    if (!Number.isNaN(spare)) {
      const s = spare;
      spare = Number.NaN;
      return s;
    }
    const r = Math.sqrt(-2 * Math.log(uniform()));
    const phi = 2 * Math.PI * uniform();
    spare = r * Math.sin(phi);
    return r * Math.cos(phi);
  };
}

/** The random numbers of `samples` runs: per run one per layer, one per material and one common (row-major). */
export function drawRuns(recipe: ResolvedRecipe, samples: number, seed: number): { z: Float64Array; width: number; materials: string[] } {
  const materials = [...new Set(recipe.layers.map((l) => l.materialName))];
  const width = recipe.layers.length + materials.length + 1;
  const normal = createNormalStream(seed);
  const z = new Float64Array(samples * width);
  for (let k = 0; k < z.length; k++) z[k] = normal();
  return { z, width, materials };
}

/**
 * One sampled run's relative errors: per layer the physical thickness t_i and the index κ_i − 1
 * of its material, from its random numbers `z` (at `offset`).
 */
function sampleErrors(
  recipe: ResolvedRecipe,
  errors: readonly LayerError[],
  spread: ProcessSpread,
  z: Float64Array,
  offset: number,
  materials: readonly string[],
  thickness: Float64Array,
  index: Float64Array,
): void {
  const n = recipe.layers.length;
  const common = spread.indexOffset + spread.indexCommonSigma * (z[offset + n + materials.length] as number);
  recipe.layers.forEach((l, i) => {
    const m = materials.indexOf(l.materialName);
    const kappa = common + spread.indexMaterialSigma * (z[offset + n + m] as number);
    const e = (errors[i] as LayerError).sigma * (z[offset + i] as number);
    index[i] = kappa;
    // An optical cut ends on u = κ·d: d = u/κ.
    thickness[i] = (errors[i] as LayerError).on === 'optical' ? (1 + e) / (1 + kappa) - 1 : e;
  });
}

/** The design's stack with each layer's thickness and index off by the given fractions. */
export function perturbedStack(recipe: ResolvedRecipe, thickness: ArrayLike<number>, index: ArrayLike<number>): StackSpec {
  const design = recipe.design.stack;
  return {
    ...design,
    layers: design.layers.map((l, i) => ({
      dispersion: scaledDispersion(l.dispersion, 1 + (index[i] as number), 0),
      thicknessNm: Math.max(0, l.thicknessNm * (1 + (thickness[i] as number))),
    })),
  };
}

/** The band the deviation is judged over without tolerances: the design's, else the monitor's range within every material's data. */
export function judgedBand(recipe: ResolvedRecipe): { fromNm: number; toNm: number } {
  if (recipe.design.band) return recipe.design.band;
  let [lo, hi] = recipe.monitor.rangeNm;
  for (const l of recipe.layers) {
    lo = Math.max(lo, l.validRangeNm[0]);
    hi = Math.min(hi, l.validRangeNm[1]);
  }
  return { fromNm: lo, toNm: hi };
}

/** The exact Monte Carlo: every sampled run's stack built and its spectra computed. */
export function predictYield(recipe: ResolvedRecipe, errors: readonly LayerError[], spread: ProcessSpread, options: { samples?: number; seed?: number } = {}): Prediction {
  // A mean deviation settles with fewer runs than a proportion near 100 %.
  const samples = options.samples ?? (recipe.design.tolerances.length > 0 ? 600 : 200);
  const { z, width, materials } = drawRuns(recipe, samples, options.seed ?? 1);
  const n = recipe.layers.length;
  const thickness = new Float64Array(n);
  const index = new Float64Array(n);
  const tolerances = recipe.design.tolerances;
  const band = judgedBand(recipe);
  const grid = bandGrid(band);
  const designT = transmittance(recipe.design.stack, grid);
  let met = 0;
  let sumMaxT = 0;
  for (let s = 0; s < samples; s++) {
    sampleErrors(recipe, errors, spread, z, s * width, materials, thickness, index);
    const stack = perturbedStack(recipe, thickness, index);
    if (tolerances.length > 0) {
      if (checkTolerances(stack, tolerances).pass) met++;
    } else {
      const t = transmittance(stack, grid);
      let worst = 0;
      for (let w = 0; w < grid.length; w++) worst = Math.max(worst, Math.abs((t[w] as number) - (designT[w] as number)));
      sumMaxT += worst;
    }
  }
  return {
    samples,
    yieldPercent: tolerances.length > 0 ? (100 * met) / samples : null,
    meanMaxAbsT: tolerances.length > 0 ? null : sumMaxT / samples,
  };
}

/** The band's grid for the deviation, 2 nm steps (as the study's). */
function bandGrid(band: { fromNm: number; toNm: number }): Float64Array {
  const count = Math.floor((band.toNm - band.fromNm) / 2 + 1e-9) + 1;
  return Float64Array.from({ length: count }, (_, i) => band.fromNm + 2 * i);
}

function transmittance(stack: StackSpec, grid: Float64Array): Float64Array {
  const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
  spectrum(out, buildOpticalModel(stack, grid, 0), 'mean');
  return out.T;
}

/**
 * The yield on the spectra's first derivatives: every judged point's value is the design's plus
 * Σ_i (∂S/∂t_i)·t_i + (∂S/∂κ_i)·κ_i, with the same sampled runs for every variant of the error
 * model, so that two variants differ only by what changed (common random numbers). Each run's
 * points are kept summed; a variant that changes one layer's error costs one pass over them.
 */
export class LinearYieldModel {
  readonly samples: number;
  /** Judged points: per tolerance its grid (or the band's grid for the deviation). */
  private readonly points: number;
  private readonly segments: { tolerance: Tolerance | null; from: number; count: number }[] = [];
  private readonly base: Float64Array;
  /** ∂S/∂t_i and ∂S/∂κ_i per layer, each `points` long. */
  private readonly dThickness: Float64Array[];
  private readonly dIndex: Float64Array[];
  private readonly z: Float64Array;
  private readonly width: number;
  private readonly materials: string[];
  private errors: LayerError[];
  /** Per run, the judged points as the current errors give them. */
  private readonly values: Float64Array;
  private readonly layerCount: number;

  constructor(
    private readonly recipe: ResolvedRecipe,
    errors: readonly LayerError[],
    private readonly spread: ProcessSpread,
    options: { samples?: number; seed?: number } = {},
  ) {
    this.samples = options.samples ?? 1000;
    const tolerances = recipe.design.tolerances;
    const band = judgedBand(recipe);
    let from = 0;
    if (tolerances.length > 0) {
      for (const t of tolerances) {
        const count = toleranceGrid(t).length;
        this.segments.push({ tolerance: t, from, count });
        from += count;
      }
    } else {
      const count = bandGrid(band).length;
      this.segments.push({ tolerance: null, from, count });
      from += count;
    }
    this.points = from;
    const n = recipe.layers.length;
    this.layerCount = n;
    const zero = new Float64Array(n);
    this.base = this.evaluate(zero, zero);
    const h = 1e-3;
    this.dThickness = [];
    this.dIndex = [];
    for (let i = 0; i < n; i++) {
      const plus = new Float64Array(n);
      const minus = new Float64Array(n);
      plus[i] = h;
      minus[i] = -h;
      this.dThickness.push(derivative(this.evaluate(plus, zero), this.evaluate(minus, zero), h));
      this.dIndex.push(derivative(this.evaluate(zero, plus), this.evaluate(zero, minus), h));
    }
    const drawn = drawRuns(recipe, this.samples, options.seed ?? 1);
    this.z = drawn.z;
    this.width = drawn.width;
    this.materials = drawn.materials;
    this.errors = errors.slice();
    this.values = new Float64Array(this.samples * this.points);
    const thickness = new Float64Array(n);
    const index = new Float64Array(n);
    for (let s = 0; s < this.samples; s++) {
      sampleErrors(recipe, this.errors, spread, this.z, s * this.width, this.materials, thickness, index);
      const row = this.values.subarray(s * this.points, (s + 1) * this.points);
      row.set(this.base);
      for (let i = 0; i < n; i++) {
        addScaled(row, this.dThickness[i] as Float64Array, thickness[i] as number);
        addScaled(row, this.dIndex[i] as Float64Array, index[i] as number);
      }
    }
  }

  /** The judged points (fractions) of a stack with the given relative thickness and index errors. */
  private evaluate(thickness: Float64Array, index: Float64Array): Float64Array {
    const stack = perturbedStack(this.recipe, thickness, index);
    const out = new Float64Array(this.points);
    for (const seg of this.segments) {
      const values = seg.tolerance ? toleranceSpectrum(stack, seg.tolerance) : transmittance(stack, bandGrid(judgedBand(this.recipe)));
      out.set(values, seg.from);
    }
    return out;
  }

  /** The prediction with the current errors, or with layer `i`'s replaced by `trial`. */
  predict(trial?: { layer: number; error: LayerError }): Prediction {
    const tolerances = this.segments[0]?.tolerance !== null;
    const points = this.points;
    const zeros = this.dThickness[0] ?? new Float64Array(points);
    let met = 0;
    let sumMaxT = 0;
    for (let s = 0; s < this.samples; s++) {
      const at = s * points;
      // The trial moves this run's points along one layer's derivative.
      let shift = 0;
      let d = zeros;
      if (trial) {
        const i = trial.layer;
        const offset = s * this.width;
        const kappa = this.kappaOf(offset, i);
        const z = this.z[offset + i] as number;
        shift = this.thicknessError(trial.error, z, kappa) - this.thicknessError(this.errors[i] as LayerError, z, kappa);
        d = this.dThickness[i] as Float64Array;
      }
      if (tolerances) {
        let pass = true;
        for (const seg of this.segments) {
          if (!meets(seg.tolerance as Tolerance, this.values, at, seg.from, seg.count, d, shift)) {
            pass = false;
            break;
          }
        }
        if (pass) met++;
      } else {
        let worst = 0;
        for (let w = 0; w < points; w++) {
          const v = (this.values[at + w] as number) + shift * (d[w] as number);
          worst = Math.max(worst, Math.abs(v - (this.base[w] as number)));
        }
        sumMaxT += worst;
      }
    }
    return { samples: this.samples, yieldPercent: tolerances ? (100 * met) / this.samples : null, meanMaxAbsT: tolerances ? null : sumMaxT / this.samples };
  }

  /** The prediction with every layer's error replaced (a change that moves many layers, such as a fresh chip). */
  predictAll(errors: readonly LayerError[]): Prediction {
    const saved = this.errors.slice();
    errors.forEach((e, i) => this.commit(i, e));
    const p = this.predict();
    saved.forEach((e, i) => this.commit(i, e));
    return p;
  }

  /** Take layer `i`'s error as `error` from now on. */
  commit(i: number, error: LayerError): void {
    for (let s = 0; s < this.samples; s++) {
      const offset = s * this.width;
      const kappa = this.kappaOf(offset, i);
      const before = this.thicknessError(this.errors[i] as LayerError, this.z[offset + i] as number, kappa);
      const after = this.thicknessError(error, this.z[offset + i] as number, kappa);
      addScaled(this.values.subarray(s * this.points, (s + 1) * this.points), this.dThickness[i] as Float64Array, after - before);
    }
    this.errors[i] = error;
  }

  private kappaOf(offset: number, i: number): number {
    const n = this.layerCount;
    const m = this.materials.indexOf((this.recipe.layers[i] as { materialName: string }).materialName);
    return this.spread.indexOffset + this.spread.indexCommonSigma * (this.z[offset + n + this.materials.length] as number) + this.spread.indexMaterialSigma * (this.z[offset + n + m] as number);
  }

  private thicknessError(error: LayerError, z: number, kappa: number): number {
    const e = error.sigma * z;
    return error.on === 'optical' ? (1 + e) / (1 + kappa) - 1 : e;
  }
}

/**
 * Whether a run's points `from … from + count` (fractions, the run's row starting at `at`),
 * each moved by `shift` × its derivative `d`, lie within the tolerance's bounds (NaN fails).
 */
function meets(t: Tolerance, values: Float64Array, at: number, from: number, count: number, d: Float64Array, shift: number): boolean {
  const low = t.atLeastPercent === undefined ? Number.NEGATIVE_INFINITY : t.atLeastPercent / 100;
  const high = t.atMostPercent === undefined ? Number.POSITIVE_INFINITY : t.atMostPercent / 100;
  for (let k = from; k < from + count; k++) {
    const v = (values[at + k] as number) + shift * (d[k] as number);
    if (!(v >= low && v <= high)) return false;
  }
  return true;
}

function derivative(plus: Float64Array, minus: Float64Array, h: number): Float64Array {
  return plus.map((p, k) => (p - (minus[k] as number)) / (2 * h));
}

function addScaled(out: Float64Array, v: Float64Array, scale: number): void {
  if (scale === 0) return;
  for (let k = 0; k < out.length; k++) out[k] = (out[k] as number) + (v[k] as number) * scale;
}

/**
 * The range a study of `runs` runs would measure, 95 %, if the predicted yield is the truth: the
 * binomial's 2.5 % and 97.5 % quantiles (exact sums), with the prediction's own sampling
 * uncertainty (its Wilson interval over `samples`) widening it on both sides.
 */
export function studyRange(yieldPercent: number, samples: number, runs: number): { low: number; high: number } {
  const own = wilsonInterval(Math.round((yieldPercent / 100) * samples), samples);
  return { low: (100 * binomialQuantile(own.low, runs, 0.025)) / runs, high: (100 * binomialQuantile(own.high, runs, 0.975)) / runs };
}

/** The smallest k with P(X ≤ k) ≥ q for X ~ Binomial(n, p). */
function binomialQuantile(p: number, n: number, q: number): number {
  if (p <= 0) return 0;
  if (p >= 1) return n;
  let term = (1 - p) ** n;
  let sum = term;
  for (let k = 0; k < n; k++) {
    if (sum >= q) return k;
    term *= ((n - k) / (k + 1)) * (p / (1 - p));
    sum += term;
  }
  return n;
}

