/**
 * The joint refit of one chip's finished layers (ESTIMATION.md): every layer's signal on the
 * chip depends on every layer below it, so a layer fitted alone inherits the errors of the
 * estimates it was fitted on — on a level-monitored stack they add up layer by layer. After each
 * layer this refit fits all the chip's layers together, from a thinned record of each one's
 * readings on the crystal's clock, and hands the later layers (and the re-plan) thicknesses and
 * indices that every reading so far agrees with.
 *
 * Model (u in chip nm at the design index, as layer-fit.ts): for layer j of material m,
 *   u_j(c) = u₀_j + ρ_m·(1 + δ_j)·r_j·min(c, c_close,j),   y = g_j·F_j(u_j(c)) + o_j + ε,
 * c the crystal's clock (its part thickness over the planned rate), r_j the planned chip rate,
 * F_j the chip's signal with layer j growing at index κ_m·n on the layers below at their fitted
 * u_k/κ_k (chipMonitorFor). Shared by all the material's layers: ρ_m (the chip's growth on the
 * crystal's clock over the plan: tooling, chip ratio and index in one number) and κ_m; per layer:
 * the start u₀_j ~ N(0, startSigmaNm) (chip and crystal start growing at the same opening), a
 * small rate deviation δ_j ~ N(0, rateSpread), gain g_j ~ N(1, σ_g) and offset o_j ~ N(0, σ_o)
 * (per layer: the chip model's small errors move a high-reflectance stack's level by per cents).
 * A kept reading may be the mean of several (its weight): its information is weight/σ².
 * ρ_m and κ_m start from the priors the caller gives (the earlier chips' posteriors).
 *
 * Levenberg–Marquardt (Marquardt, J. SIAM 11, 431 (1963); from memory) on forward differences
 * for ρ, κ, u₀, δ and analytic columns for g and o; priors as pseudo-observations. The cost is a
 * chip monitor per layer and per perturbed parameter and one signal per kept reading: with 66
 * kept readings a layer, 12 layers take some tens of milliseconds an iteration. Pure.
 */
import { chipMonitorFor } from '../plan/plan.ts';
import type { ResolvedRecipe } from '../plan/recipe.ts';
import { inverse, solveDamped } from '../numeric/dense.ts';

/** One finished layer as the refit sees it: its readings on the crystal's clock. */
export interface RefitLayer {
  /** 0-based layer index in the recipe. */
  readonly index: number;
  /** Crystal clock of each kept reading (s at the planned rate since the opening), the reading, and its weight (readings averaged into it). */
  readonly clocks: Float64Array;
  readonly values: Float64Array;
  readonly weights: Float64Array;
  /** Clock at which the shutter closed. */
  readonly closeClock: number;
  /** Where to start this layer's u₀, δ, g, o (a previous refit's; default the priors' means). */
  readonly start?: readonly [number, number, number, number];
}

export interface MaterialFactor {
  readonly factor: number;
  readonly sigma: number;
}

export interface ChipRefitOptions {
  /** rms of one reading. */
  noise: number;
  /** Part thickness and index factor of the chip's layers that are not refitted (crystal lost, say). */
  fixedPartNm: readonly number[];
  fixedIndexFactors: readonly number[];
  /** Priors of ρ and κ per material (absent: ρ ~ N(1, defaultRateSigma), κ ~ N(1, defaultIndexSigma)). */
  ratePriors: Readonly<Record<string, MaterialFactor>>;
  indexPriors: Readonly<Record<string, MaterialFactor>>;
  defaultRateSigma: number;
  defaultIndexSigma: number;
  startSigmaNm: number;
  rateSpread: number;
  gainSigma: number;
  offsetSigma: number;
  maxIterations?: number;
  /** Where to start ρ and κ per material (default the priors' means). */
  startRate?: Readonly<Record<string, number>>;
  startIndex?: Readonly<Record<string, number>>;
}

export interface RefitLayerResult {
  readonly index: number;
  /** Physical part thickness, nm, and index factor; the optical thickness u/chipRatio (part nm at the design index) and its rms. */
  readonly partNm: number;
  readonly indexFactor: number;
  readonly opticalNm: number;
  readonly opticalSigmaNm: number;
  /** The layer's fitted u₀, δ, g, o (to start the next refit from). */
  readonly parameters: readonly [number, number, number, number];
}

export interface ChipRefitResult {
  readonly layers: readonly RefitLayerResult[];
  readonly rate: Readonly<Record<string, MaterialFactor>>;
  readonly index: Readonly<Record<string, MaterialFactor>>;
  readonly iterations: number;
  /** rms of the weighted residuals over the noise (≈ 1 when the model holds). */
  readonly residualRatio: number;
}

const PER_LAYER = 4; // u₀, δ, g, o
const U0 = 0;
const DELTA = 1;
const GAIN = 2;
const OFFSET = 3;

export function refitChip(recipe: ResolvedRecipe, layers: readonly RefitLayer[], options: ChipRefitOptions): ChipRefitResult {
  if (layers.length === 0) return { layers: [], rate: {}, index: {}, iterations: 0, residualRatio: Number.NaN };
  const materials = [...new Set(layers.map((l) => materialOf(recipe, l.index)))];
  const M = materials.length;
  const J = layers.length;
  const P = 2 * M + PER_LAYER * J;
  const rateAt = (m: number): number => m;
  const indexAt = (m: number): number => M + m;
  const layerAt = (j: number, what: number): number => 2 * M + PER_LAYER * j + what;
  const materialIndex = layers.map((l) => materials.indexOf(materialOf(recipe, l.index)));
  const plannedRate = layers.map((l) => {
    const layer = recipe.layers[l.index] as ResolvedRecipe['layers'][number];
    return layer.rateNmPerS * layer.chipRatio;
  });
  const chipRatio = layers.map((l) => (recipe.layers[l.index] as ResolvedRecipe['layers'][number]).chipRatio);

  // Priors: means and information.
  const priorMean = new Float64Array(P);
  const priorInfo = new Float64Array(P);
  materials.forEach((name, m) => {
    const rate = options.ratePriors[name];
    const index = options.indexPriors[name];
    priorMean[rateAt(m)] = rate?.factor ?? 1;
    priorInfo[rateAt(m)] = 1 / (rate?.sigma ?? options.defaultRateSigma) ** 2;
    priorMean[indexAt(m)] = index?.factor ?? 1;
    priorInfo[indexAt(m)] = 1 / (index?.sigma ?? options.defaultIndexSigma) ** 2;
  });
  for (let j = 0; j < J; j++) {
    priorMean[layerAt(j, GAIN)] = 1;
    priorInfo[layerAt(j, U0)] = 1 / options.startSigmaNm ** 2;
    priorInfo[layerAt(j, DELTA)] = 1 / options.rateSpread ** 2;
    priorInfo[layerAt(j, GAIN)] = 1 / options.gainSigma ** 2;
    priorInfo[layerAt(j, OFFSET)] = 1 / options.offsetSigma ** 2;
  }

  const counts = layers.map((l) => l.values.length);
  const offsets: number[] = [];
  let N = 0;
  for (const c of counts) {
    offsets.push(N);
    N += c;
  }
  const invVar = 1 / (options.noise * options.noise);
  // Each reading's information: its weight over σ².
  const info = new Float64Array(N);
  layers.forEach((l, j) => {
    for (let i = 0; i < l.weights.length; i++) info[(offsets[j] as number) + i] = (l.weights[i] as number) * invVar;
  });

  /** Chip u at clock c for layer j under θ. */
  const uAt = (theta: Float64Array, j: number, clock: number): number => {
    const l = layers[j] as RefitLayer;
    const m = materialIndex[j] as number;
    return (theta[layerAt(j, U0)] as number) + (theta[rateAt(m)] as number) * (1 + (theta[layerAt(j, DELTA)] as number)) * (plannedRate[j] as number) * Math.min(clock, l.closeClock);
  };

  /** The chip's part thicknesses and index factors under θ (the refitted layers' final u/κ). */
  function stackOf(theta: Float64Array): { partNm: number[]; indexFactors: number[] } {
    const partNm = [...options.fixedPartNm];
    const indexFactors = [...options.fixedIndexFactors];
    layers.forEach((l, j) => {
      const kappa = theta[indexAt(materialIndex[j] as number)] as number;
      // A trial step may take a thin layer below zero; the optics refuse that, and a layer there is none.
      partNm[l.index] = Math.max(0, uAt(theta, j, l.closeClock) / kappa / (chipRatio[j] as number));
      indexFactors[l.index] = kappa;
    });
    return { partNm, indexFactors };
  }

  /** Signals (without gain and offset) of layers from j0 on, into `signal`. */
  function signals(theta: Float64Array, j0: number, signal: Float64Array): void {
    const stack = stackOf(theta);
    for (let j = j0; j < J; j++) {
      const l = layers[j] as RefitLayer;
      const kappa = theta[indexAt(materialIndex[j] as number)] as number;
      const monitor = chipMonitorFor(recipe, l.index, stack.partNm, { indexFactors: stack.indexFactors, growingIndexFactor: kappa });
      const base = offsets[j] as number;
      for (let i = 0; i < l.clocks.length; i++) signal[base + i] = monitor.signalAt(uAt(theta, j, l.clocks[i] as number) / kappa);
    }
  }

  function costOf(theta: Float64Array, signal: Float64Array): number {
    let cost = 0;
    layers.forEach((l, j) => {
      const g = theta[layerAt(j, GAIN)] as number;
      const o = theta[layerAt(j, OFFSET)] as number;
      const base = offsets[j] as number;
      for (let i = 0; i < l.values.length; i++) {
        const e = (l.values[i] as number) - (g * (signal[base + i] as number) + o);
        cost += e * e * invVar * (l.weights[i] as number);
      }
    });
    for (let p = 0; p < P; p++) cost += (priorInfo[p] as number) * ((theta[p] as number) - (priorMean[p] as number)) ** 2;
    return cost;
  }

  const theta = Float64Array.from(priorMean);
  materials.forEach((name, m) => {
    theta[rateAt(m)] = options.startRate?.[name] ?? (theta[rateAt(m)] as number);
    theta[indexAt(m)] = options.startIndex?.[name] ?? (theta[indexAt(m)] as number);
  });
  layers.forEach((l, j) => {
    if (l.start) for (let k = 0; k < PER_LAYER; k++) theta[layerAt(j, k)] = l.start[k] as number;
  });
  let signal = new Float64Array(N);
  signals(theta, 0, signal);
  let cost = costOf(theta, signal);
  let lambda = 1e-3;
  let iterations = 0;
  let A = new Float64Array(P * P);
  const maxIterations = options.maxIterations ?? 12;
  // Columns of ∂(g·S)/∂θ for the finite-difference parameters, reading-major.
  const column = new Float64Array(N);
  const shifted = new Float64Array(N);
  const jac = new Float64Array(P * N);

  let converged = false;
  while (!converged && iterations < maxIterations) {
    iterations++;
    jac.fill(0);
    const fdParams: number[] = [];
    for (let m = 0; m < M; m++) fdParams.push(rateAt(m), indexAt(m));
    for (let j = 0; j < J; j++) fdParams.push(layerAt(j, U0), layerAt(j, DELTA));
    for (const p of fdParams) {
      const h = p >= 2 * M && (p - 2 * M) % PER_LAYER === U0 ? 1e-4 : 1e-6;
      const saved = theta[p] as number;
      theta[p] = saved + h;
      // A layer's own parameters change its signal and those of the layers above only.
      const j0 = p >= 2 * M ? Math.floor((p - 2 * M) / PER_LAYER) : 0;
      shifted.set(signal);
      signals(theta, j0, shifted);
      theta[p] = saved;
      for (let j = j0; j < J; j++) {
        const g = theta[layerAt(j, GAIN)] as number;
        const base = offsets[j] as number;
        for (let i = 0; i < (counts[j] as number); i++) jac[p * N + base + i] = (g * ((shifted[base + i] as number) - (signal[base + i] as number))) / h;
      }
    }
    for (let j = 0; j < J; j++) {
      const base = offsets[j] as number;
      for (let i = 0; i < (counts[j] as number); i++) {
        jac[layerAt(j, GAIN) * N + base + i] = signal[base + i] as number;
        jac[layerAt(j, OFFSET) * N + base + i] = 1;
      }
    }
    // Normal equations (lower triangle) and gradient.
    A = new Float64Array(P * P);
    const b = new Float64Array(P);
    const residual = column;
    layers.forEach((l, j) => {
      const g = theta[layerAt(j, GAIN)] as number;
      const o = theta[layerAt(j, OFFSET)] as number;
      const base = offsets[j] as number;
      for (let i = 0; i < l.values.length; i++) residual[base + i] = (l.values[i] as number) - (g * (signal[base + i] as number) + o);
    });
    for (let p = 0; p < P; p++) {
      const rowP = p * N;
      let bp = 0;
      for (let i = 0; i < N; i++) bp += (jac[rowP + i] as number) * (info[i] as number) * (residual[i] as number);
      b[p] = bp + (priorInfo[p] as number) * ((priorMean[p] as number) - (theta[p] as number));
      for (let q = 0; q <= p; q++) {
        const rowQ = q * N;
        let sum = 0;
        for (let i = 0; i < N; i++) sum += (jac[rowP + i] as number) * (info[i] as number) * (jac[rowQ + i] as number);
        A[p * P + q] = sum + (p === q ? (priorInfo[p] as number) : 0);
      }
    }
    let improved = false;
    for (let attempt = 0; attempt < 8; attempt++) {
      const step = solveDamped(A, b, P, lambda);
      const trial = Float64Array.from(theta, (t, p) => t + (step[p] as number));
      const trialSignal = new Float64Array(N);
      signals(trial, 0, trialSignal);
      const trialCost = costOf(trial, trialSignal);
      if (trialCost < cost) {
        const gain = cost - trialCost;
        theta.set(trial);
        signal = trialSignal;
        cost = trialCost;
        lambda = Math.max(lambda / 10, 1e-9);
        improved = true;
        // Settled when a step gains less than a millionth of the cost (χ² ≈ the readings).
        converged = gain < 1e-6 * Math.max(1, cost);
        break;
      }
      lambda *= 10;
    }
    if (!improved) break;
  }

  // Covariance from the last normal matrix (undamped).
  const cov = inverse(A, P);
  const sd = (p: number): number => Math.sqrt(Math.max(0, cov[p * P + p] as number));
  const stack = stackOf(theta);
  const results: RefitLayerResult[] = layers.map((l, j) => {
    const m = materialIndex[j] as number;
    // ∂u_final/∂(ρ, δ, u₀): the variance of the optical thickness from the covariance.
    const c = (plannedRate[j] as number) * l.closeClock;
    const rho = theta[rateAt(m)] as number;
    const dl = theta[layerAt(j, DELTA)] as number;
    const grad = new Map<number, number>([
      [layerAt(j, U0), 1],
      [rateAt(m), (1 + dl) * c],
      [layerAt(j, DELTA), rho * c],
    ]);
    let variance = 0;
    for (const [p, gp] of grad) for (const [q, gq] of grad) variance += gp * gq * (cov[p * P + q] as number);
    const u = uAt(theta, j, l.closeClock);
    return {
      index: l.index,
      partNm: stack.partNm[l.index] as number,
      indexFactor: stack.indexFactors[l.index] as number,
      opticalNm: u / (chipRatio[j] as number),
      opticalSigmaNm: Math.sqrt(Math.max(0, variance)) / (chipRatio[j] as number),
      parameters: [theta[layerAt(j, U0)] as number, dl, theta[layerAt(j, GAIN)] as number, theta[layerAt(j, OFFSET)] as number],
    };
  });
  const rate: Record<string, MaterialFactor> = {};
  const index: Record<string, MaterialFactor> = {};
  materials.forEach((name, m) => {
    rate[name] = { factor: theta[rateAt(m)] as number, sigma: sd(rateAt(m)) };
    index[name] = { factor: theta[indexAt(m)] as number, sigma: sd(indexAt(m)) };
  });
  let weighted = 0;
  layers.forEach((l, j) => {
    const g = theta[layerAt(j, GAIN)] as number;
    const o = theta[layerAt(j, OFFSET)] as number;
    const base = offsets[j] as number;
    for (let i = 0; i < l.values.length; i++) weighted += ((l.values[i] as number) - (g * (signal[base + i] as number) + o)) ** 2 * (info[(offsets[j] as number) + i] as number);
  });
  return { layers: results, rate, index, iterations, residualRatio: Math.sqrt(weighted / Math.max(1, N)) };
}

function materialOf(recipe: ResolvedRecipe, index: number): string {
  return (recipe.layers[index] as ResolvedRecipe['layers'][number]).materialName;
}
