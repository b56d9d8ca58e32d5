/**
 * The model-based optical estimator of one layer (ESTIMATION.md): a robust, prior-regularised
 * Gauss–Newton fit of the readings to the plan's signal curve, updated reading by reading, that
 * says how thick the layer is now, how sure it is, and when to send the cut.
 *
 * Model: y(t) = g·F(u(t), κ) + o + ε, u(t) = u₀ + r·min(t, t_close), ε white with rms σ.
 * u is the layer's thickness at the design index with the layer's optical thickness (κ·d for a
 * layer of physical thickness d at index κ·n): what optical monitoring controls, and what the cut
 * compares with the target. F(u, 1) = S(u), the plan's curve; with an index correction
 * (`indexSigma`, `indexTables`) F(u, κ) ≈ S(u) + (κ−1)·S_κ(u) + ½(κ−1)²·S_κκ(u) (signal-table.ts):
 * at a fixed optical thickness the index changes the swing's depth, not its phase, so the shape
 * of a level or turning-point curve no longer biases u when the chamber's index is not the
 * design's. θ = (u₀, r, g, o[, κ]); t counts from the layer's shutter-open command. The priors
 * enter as pseudo-observations (maximum a posteriori; Kay, *Fundamentals of Statistical Signal
 * Processing: Estimation Theory*, ch. 10): g ~ N(1, σ_g), o ~ N(0, σ_o),
 * r ~ N(r_plan, σ_r·r_plan), κ ~ N(κ_prior, σ_κ), and a weak u₀ ~ N(0, startSigmaNm) that only keeps
 * the first readings solvable on a flat start. Identifiability: g and o trade off on a flat signal,
 * u and κ with g and o to first order (the depth of the swing is also a gain): the priors fix what
 * the data cannot tell (the controller's priors of κ and r come from the material's earlier layers).
 *
 * Rate ramp after the opening: u₀ is free, so a ramp with time constant τ is absorbed as
 * u₀ ≈ −r·τ once t ≫ τ; `rampS` drops the readings of the first seconds where the ramp bends the
 * line (after 5τ the line is within r·τ·e⁻⁵ of the truth).
 *
 * Robustness: iteratively reweighted least squares with Huber weights (Huber, *Ann. Math. Stat.*
 * 35, 73 (1964)); a reading beyond `spikeSigma` is a spike and weighs nothing. Both thresholds are
 * in units of the residual's predictive spread √(σ² + jᵀΣj) (Σ the fit's covariance, j the
 * reading's gradient), so that early in the layer, while the parameters are still uncertain,
 * honest readings are not thrown away; late in the layer it tends to σ.
 *
 * Update scheme (bounded work per reading, whatever the layer's length): the readings are grouped
 * in blocks of BLOCK. Each complete block is summarised by its normal equations linearised at the
 * parameters θₖ of its last visit, A_k = Σ w jjᵀ/σ², b_k = Σ w j e/σ²; near θ its gradient is
 * b_k − A_k(θ − θₖ) (the Gauss–Newton quadratic model; Nocedal and Wright, *Numerical
 * Optimization*, ch. 10), so the running sums ΣA_k and Σ(b_k + A_kθₖ) give every summarised block
 * at any θ in O(1). Each Gauss–Newton iteration evaluates exactly only the newest incomplete block,
 * the window's oldest partial block and REFRESH_BLOCKS blocks in round robin, which it
 * re-linearises at the current θ: about 150 readings per iteration whatever the layer's length,
 * every block revisited within N/(REFRESH_BLOCKS·BLOCK) readings. The fixed point is the exact MAP
 * estimate: at convergence every block is re-linearised there. A step that moves the fitted
 * thickness by more than RELINEARISE_NM re-linearises every block at the next iteration (early
 * in the layer only). Steps are limited to maxStepNm of u at either end of the window (a
 * trust region against the first, poorly determined readings).
 *
 * Signal: S and dS/dd from a cubic Hermite table of the chip monitor (signal-table.ts), built
 * once per layer from −(0.1·target + 5 nm) to 1.5·target + 5 nm; outside it straight from the
 * monitor.
 *
 * Pure: no clock, no I/O; times come from the readings. The hot loop allocates nothing; storage
 * grows geometrically.
 */
import type { ChipMonitor } from '../plan/chip-monitor.ts';
import { layerSignalTable, signalAndSlope, type IndexTables, type SignalTable } from './signal-table.ts';

export interface LayerFitOptions {
  /** S(d) for this layer on its chip (the re-planned chip history). */
  monitor: ChipMonitor;
  /** Planned chip thickness of the layer, nm: sizes the signal table and the d₀ prior. */
  targetNm: number;
  /** A table of `monitor` built with buildSignalTable, to share between fits of the same layer. */
  table?: SignalTable;
  /** Planned chip rate nm/s, and its prior rms (fraction), e.g. from the crystal. */
  rateNmPerS: number;
  rateSigmaFraction: number;
  /** Priors of the monitor gain and offset, rms. Every prior σ must be positive; Infinity means no prior. */
  gainSigma: number;
  offsetSigma: number;
  /** rms of one reading (fraction of full scale). */
  noise: number;
  /** Huber threshold in units of the residual spread (default 3). */
  huberK?: number;
  /** Readings beyond this many spreads are spikes, weight 0 (default 8). */
  spikeSigma?: number;
  /** Use readings of the last windowS seconds (of the readings' clock) only (default: the whole layer), to follow a wandering rate. */
  windowS?: number;
  /** Fit an index correction κ (n_true = κ·n) with this prior rms (fraction); absent or 0: κ = 1 fixed. Needs `indexTables`. */
  indexSigma?: number;
  /** Mean of that prior (default 1): e.g. what the material's earlier layers showed. */
  indexFactor?: number;
  /** ∂F/∂κ and ∂²F/∂κ² on the grid of `table` (buildIndexTables). */
  indexTables?: IndexTables;
  /** Ignore readings in the first rampS seconds after the opening command (default 0). */
  rampS?: number;
  /** Prior rms of d₀, nm (default: targetNm, i.e. practically free). */
  startSigmaNm?: number;
}

export interface LayerEstimate {
  /** Thickness on the chip at the asked time, nm: u, at the design index with the layer's optical thickness. */
  thicknessNm: number;
  /** Its standard deviation from the fit's covariance (inverse information incl. priors), nm. */
  sigmaNm: number;
  rateNmPerS: number;
  gain: number;
  offset: number;
  indexFactor: number;
  /** Readings currently flagged as spikes. */
  spikes: number;
  /** Readings in the fit (the window). */
  readings: number;
}

export interface LayerFit {
  /**
   * Adds a reading (time since the layer's shutter-open command, s; value); a non-finite one is
   * ignored. The "time" may be any clock proportional to the deposited amount, e.g. the crystal's
   * thickness since the opening divided by the planned rate: then a wandering rate is no longer in
   * the model at all (the window slides on this clock; small inversions from its noise are fine).
   */
  add(timeS: number, value: number): void;
  /** One to two Gauss–Newton iterations warm-started from the last solution (call after each reading). */
  update(): void;
  /** The estimate at time `timeS` (s since the opening command). */
  estimate(timeS: number): LayerEstimate;
  /** When the cut command should go out so that the fitted thickness reaches `targetNm` when the shutter has closed: t_target − delay. */
  cutTimeS(targetNm: number, shutterDelayS: number): number;
  /** Every reading added so far (the clock, the value, 1 where it is now flagged a spike): views, valid until the next add. */
  readings(): { times: Float64Array; values: Float64Array; spikes: Uint8Array };
  /**
   * After the cut: the thickness stops growing at `closeTimeS`; refits to convergence with every
   * reading incl. those after the close. `thicknessNm` is u (physical: u/κ); rate, index, gain and
   * offset as fitted, with their rms (the controller carries the rate and index to the material's
   * next layer).
   */
  finalThickness(closeTimeS: number): FinalEstimate;
}

export interface FinalEstimate {
  thicknessNm: number;
  sigmaNm: number;
  rateNmPerS: number;
  rateSigma: number;
  indexFactor: number;
  indexSigma: number;
  gain: number;
  gainSigma: number;
  offset: number;
  offsetSigma: number;
}

/** Readings per block of the update scheme. */
const BLOCK = 32;
/** Blocks re-linearised per Gauss–Newton iteration. */
const REFRESH_BLOCKS = 4;
/**
 * Gauss–Newton iterations per update: a second one only when the first moved the fitted
 * thickness by more than SETTLED_SIGMA of its standard deviation (warm-started, a step is
 * usually far smaller).
 */
const ITERATIONS = 2;
const SETTLED_SIGMA = 0.05;
/**
 * A step that moves u by more than this re-linearises every block: the quadratic model of a
 * block errs by about ½|S″|Δu² per reading, ≈ 5e-6 for |S″| ≤ 1e-3 per nm² — far below σ.
 */
const RELINEARISE_NM = 0.1;
const MAX_FINAL_ITERATIONS = 50;

// Parameter indices.
const D0 = 0;
const RATE = 1;
const GAIN = 2;
const OFFSET = 3;
const INDEX = 4;
const M = 5; // row stride of the 5×5 matrices

export function createLayerFit(options: LayerFitOptions): LayerFit {
  const { monitor, targetNm, rateNmPerS, noise } = options;
  if (!(targetNm > 0)) throw new RangeError('layer fit: targetNm must be positive');
  if (!(rateNmPerS > 0)) throw new RangeError('layer fit: rateNmPerS must be positive');
  if (!(noise > 0)) throw new RangeError('layer fit: noise must be positive');
  const huberK = options.huberK ?? 3;
  const spikeK = options.spikeSigma ?? 8;
  const windowS = options.windowS !== undefined && options.windowS > 0 ? options.windowS : Number.POSITIVE_INFINITY;
  const rampS = options.rampS ?? 0;
  const P = options.indexSigma !== undefined && options.indexSigma > 0 ? 5 : 4;
  const table = options.table ?? layerSignalTable(monitor, targetNm);
  const indexTables = options.indexTables;
  if (P === 5) {
    if (!indexTables) throw new RangeError('layer fit: an index correction (indexSigma) needs indexTables');
    if (indexTables.first.count !== table.count || indexTables.first.fromNm !== table.fromNm || indexTables.first.stepNm !== table.stepNm) {
      throw new RangeError('layer fit: indexTables must be built on the grid of the signal table');
    }
  }
  const maxStepNm = Math.max(1, 0.05 * targetNm);
  const invVar = 1 / (noise * noise);
  const noiseVar = noise * noise;

  // A prior's information 1/σ²; σ = ∞ is no prior at all.
  const info = (sigma: number, what: string): number => {
    if (!(sigma > 0)) throw new RangeError(`layer fit: ${what} must be positive (Infinity for no prior)`);
    return Number.isFinite(sigma) ? 1 / (sigma * sigma) : 0;
  };
  const priorMean = Float64Array.of(0, rateNmPerS, 1, 0, P === 5 ? (options.indexFactor ?? 1) : 1);
  const priorInfo = Float64Array.of(
    info(options.startSigmaNm ?? targetNm, 'startSigmaNm'),
    info(options.rateSigmaFraction * rateNmPerS, 'rateSigmaFraction'),
    info(options.gainSigma, 'gainSigma'),
    info(options.offsetSigma, 'offsetSigma'),
    P === 5 ? info(options.indexSigma ?? 0, 'indexSigma') : 0,
  );

  const theta = Float64Array.from(priorMean);
  const cov = new Float64Array(M * M);
  for (let p = 0; p < P; p++) cov[p * M + p] = (priorInfo[p] as number) > 0 ? 1 / (priorInfo[p] as number) : Number.POSITIVE_INFINITY;

  // Readings.
  let capacity = 1024;
  let ts = new Float64Array(capacity);
  let ys = new Float64Array(capacity);
  let flags = new Uint8Array(capacity);
  let n = 0;
  let spikes = 0;
  let lastT = Number.NEGATIVE_INFINITY;

  // Block summaries: lower triangles of A_k and c_k = b_k + A_kθ_k.
  let blockCapacity = capacity / BLOCK;
  let blockA = new Float64Array(blockCapacity * M * M);
  let blockC = new Float64Array(blockCapacity * M);
  const sumA = new Float64Array(M * M);
  const sumC = new Float64Array(M);
  // Window: readings [i0, n) are fitted; blocks [kFirst, kDone) are in the sums.
  let i0 = 0;
  let kFirst = 0;
  let kDone = 0;
  let rr = 0;
  let relinearise = false;
  /** |Δu| of the last step, nm (the larger of the window's two ends). */
  let lastMoveNm = 0;
  let tClose = Number.POSITIVE_INFINITY;

  // Scratch.
  const ss = new Float64Array(2);
  const tmpA = new Float64Array(M * M);
  const tmpB = new Float64Array(M);
  const normal = new Float64Array(M * M);
  const rhs = new Float64Array(M);
  const chol = new Float64Array(M * M);
  const scale = new Float64Array(M);
  const step = new Float64Array(M);
  const lastStep = new Float64Array(M);

  function grow(): void {
    capacity *= 2;
    const t2 = new Float64Array(capacity);
    t2.set(ts);
    ts = t2;
    const y2 = new Float64Array(capacity);
    y2.set(ys);
    ys = y2;
    const f2 = new Uint8Array(capacity);
    f2.set(flags);
    flags = f2;
    blockCapacity = capacity / BLOCK;
    const a2 = new Float64Array(blockCapacity * M * M);
    a2.set(blockA);
    blockA = a2;
    const c2 = new Float64Array(blockCapacity * M);
    c2.set(blockC);
    blockC = c2;
  }

  /**
   * Adds the weighted normal equations of readings [from, to) at the current θ to A (lower
   * triangle) and b, and refreshes their spike flags.
   */
  function accumulate(from: number, to: number, A: Float64Array, b: Float64Array): void {
    const d0 = theta[D0] as number;
    const r = theta[RATE] as number;
    const g = theta[GAIN] as number;
    const o = theta[OFFSET] as number;
    const e1 = (theta[INDEX] as number) - 1;
    const halfE1Sq = 0.5 * e1 * e1;
    const withIndex = P === 5;
    // The covariance and the sums in scalars: the loop below then runs in registers.
    const c00 = cov[0] as number, c01 = cov[1] as number, c02 = cov[2] as number, c03 = cov[3] as number, c04 = cov[4] as number;
    const c11 = cov[6] as number, c12 = cov[7] as number, c13 = cov[8] as number, c14 = cov[9] as number;
    const c22 = cov[12] as number, c23 = cov[13] as number, c24 = cov[14] as number;
    const c33 = cov[18] as number, c34 = cov[19] as number, c44 = cov[24] as number;
    let a00 = 0, a10 = 0, a11 = 0, a20 = 0, a21 = 0, a22 = 0, a30 = 0, a31 = 0, a32 = 0, a33 = 0;
    let a40 = 0, a41 = 0, a42 = 0, a43 = 0, a44 = 0;
    let b0 = 0, b1 = 0, b2 = 0, b3 = 0, b4 = 0;
    const values = table.values;
    const slopes = table.slopes;
    const firstTable = withIndex ? (indexTables as IndexTables).first : table;
    const secondTable = withIndex ? (indexTables as IndexTables).second : table;
    const values1 = firstTable.values;
    const slopes1 = firstTable.slopes;
    const values2 = secondTable.values;
    const slopes2 = secondTable.slopes;
    const h = table.stepNm;
    const invH = 1 / h;
    const from0 = table.fromNm;
    const last = table.count - 1;
    const times = ts;
    const readings = ys;
    const marks = flags;
    for (let i = from; i < to; i++) {
      const ti = times[i] as number;
      const t = ti < tClose ? ti : tClose;
      const u = d0 + r * t;
      // F(u, κ) and ∂F/∂u, ∂F/∂κ: the cubic Hermite splines of signal-table.ts, inlined (one basis for every table).
      let s: number;
      let ds: number;
      let dk = 0;
      const x = (u - from0) * invH;
      const j = Math.floor(x);
      if (j >= 0 && j < last) {
        const f = x - j;
        const f2 = f * f;
        const f3 = f2 * f;
        const h00 = 2 * f3 - 3 * f2 + 1;
        const h10 = (f3 - 2 * f2 + f) * h;
        const h01 = 3 * f2 - 2 * f3;
        const h11 = (f3 - f2) * h;
        const q00 = (6 * f2 - 6 * f) * invH;
        const q10 = 3 * f2 - 4 * f + 1;
        const q11 = 3 * f2 - 2 * f;
        const p0 = values[j] as number;
        const p1 = values[j + 1] as number;
        const m0 = slopes[j] as number;
        const m1 = slopes[j + 1] as number;
        s = h00 * p0 + h10 * m0 + h01 * p1 + h11 * m1;
        ds = q00 * (p0 - p1) + q10 * m0 + q11 * m1;
        if (withIndex) {
          const g0 = values1[j] as number, g1 = values1[j + 1] as number, gm0 = slopes1[j] as number, gm1 = slopes1[j + 1] as number;
          const k0 = values2[j] as number, k1 = values2[j + 1] as number, km0 = slopes2[j] as number, km1 = slopes2[j + 1] as number;
          const first = h00 * g0 + h10 * gm0 + h01 * g1 + h11 * gm1;
          const second = h00 * k0 + h10 * km0 + h01 * k1 + h11 * km1;
          s += e1 * first + halfE1Sq * second;
          ds += e1 * (q00 * (g0 - g1) + q10 * gm0 + q11 * gm1) + halfE1Sq * (q00 * (k0 - k1) + q10 * km0 + q11 * km1);
          dk = first + e1 * second;
        }
      } else {
        signalAndSlope(table, u, ss);
        s = ss[0] as number;
        ds = ss[1] as number;
        if (withIndex) {
          signalAndSlope(firstTable, u, ss);
          const first = ss[0] as number;
          ds += e1 * (ss[1] as number);
          signalAndSlope(secondTable, u, ss);
          s += e1 * first + halfE1Sq * (ss[0] as number);
          ds += halfE1Sq * (ss[1] as number);
          dk = first + e1 * (ss[0] as number);
        }
      }
      const e = (readings[i] as number) - (g * s + o);
      // ∂y/∂θ: (g ∂F/∂u, g ∂F/∂u t, F, 1, g ∂F/∂κ)
      const j0 = g * ds;
      const j1 = j0 * t;
      const j2 = s;
      const j4 = g * dk;
      // Predictive variance of the reading: σ² + jᵀΣj (j₃ = 1).
      const v =
        c00 * j0 * j0 + c11 * j1 * j1 + c22 * j2 * j2 + c33 + c44 * j4 * j4 +
        2 * (c01 * j0 * j1 + c02 * j0 * j2 + c03 * j0 + c04 * j0 * j4 + c12 * j1 * j2 + c13 * j1 + c14 * j1 * j4 + c23 * j2 + c24 * j2 * j4 + c34 * j4);
      const spread = Math.sqrt(noiseVar + v);
      const size = Math.abs(e);
      let w = 1;
      let spike = 0;
      if (spread < Number.POSITIVE_INFINITY) {
        if (size > spikeK * spread) {
          w = 0;
          spike = 1;
        } else if (size > huberK * spread) {
          w = (huberK * spread) / size;
        }
      }
      const old = marks[i] as number;
      if (old !== spike) {
        spikes += spike - old;
        marks[i] = spike;
      }
      if (w === 0) continue;
      const we = w * invVar;
      const w0 = we * j0, w1 = we * j1, w2 = we * j2, w4 = we * j4;
      a00 += w0 * j0;
      a10 += w1 * j0;
      a11 += w1 * j1;
      a20 += w2 * j0;
      a21 += w2 * j1;
      a22 += w2 * j2;
      a30 += w0;
      a31 += w1;
      a32 += w2;
      a33 += we;
      a40 += w4 * j0;
      a41 += w4 * j1;
      a42 += w4 * j2;
      a43 += w4;
      a44 += w4 * j4;
      b0 += w0 * e;
      b1 += w1 * e;
      b2 += w2 * e;
      b3 += we * e;
      b4 += w4 * e;
    }
    A[0] = (A[0] as number) + a00;
    A[5] = (A[5] as number) + a10;
    A[6] = (A[6] as number) + a11;
    A[10] = (A[10] as number) + a20;
    A[11] = (A[11] as number) + a21;
    A[12] = (A[12] as number) + a22;
    A[15] = (A[15] as number) + a30;
    A[16] = (A[16] as number) + a31;
    A[17] = (A[17] as number) + a32;
    A[18] = (A[18] as number) + a33;
    b[0] = (b[0] as number) + b0;
    b[1] = (b[1] as number) + b1;
    b[2] = (b[2] as number) + b2;
    b[3] = (b[3] as number) + b3;
    if (withIndex) {
      A[20] = (A[20] as number) + a40;
      A[21] = (A[21] as number) + a41;
      A[22] = (A[22] as number) + a42;
      A[23] = (A[23] as number) + a43;
      A[24] = (A[24] as number) + a44;
      b[4] = (b[4] as number) + b4;
    }
  }

  /** Re-linearises block k at θ and replaces its share of the sums. */
  function linearise(k: number, inSums: boolean): void {
    tmpA.fill(0);
    tmpB.fill(0);
    accumulate(k * BLOCK, (k + 1) * BLOCK, tmpA, tmpB);
    const a = k * M * M;
    const c = k * M;
    for (let p = 0; p < P; p++) {
      // c_k = b_k + A_k θ (A_k symmetric, lower triangle stored).
      let sum = tmpB[p] as number;
      for (let q = 0; q < P; q++) sum += (tmpA[p >= q ? p * M + q : q * M + p] as number) * (theta[q] as number);
      if (inSums) sumC[p] = (sumC[p] as number) - (blockC[c + p] as number);
      sumC[p] = (sumC[p] as number) + sum;
      blockC[c + p] = sum;
      for (let q = 0; q <= p; q++) {
        const idx = p * M + q;
        if (inSums) sumA[idx] = (sumA[idx] as number) - (blockA[a + idx] as number);
        sumA[idx] = (sumA[idx] as number) + (tmpA[idx] as number);
        blockA[a + idx] = tmpA[idx] as number;
      }
    }
  }

  function removeBlock(k: number): void {
    const a = k * M * M;
    const c = k * M;
    for (let p = 0; p < P; p++) {
      sumC[p] = (sumC[p] as number) - (blockC[c + p] as number);
      for (let q = 0; q <= p; q++) sumA[p * M + q] = (sumA[p * M + q] as number) - (blockA[a + p * M + q] as number);
    }
  }

  /** The sums afresh from the stored blocks (clears the rounding of many add/subtract cycles). */
  function resum(): void {
    sumA.fill(0);
    sumC.fill(0);
    for (let k = kFirst; k < kDone; k++) {
      const a = k * M * M;
      const c = k * M;
      for (let p = 0; p < P; p++) {
        sumC[p] = (sumC[p] as number) + (blockC[c + p] as number);
        for (let q = 0; q <= p; q++) sumA[p * M + q] = (sumA[p * M + q] as number) + (blockA[a + p * M + q] as number);
      }
    }
  }

  /** Readings before this time are out of the fit: the last windowS s, or from windowS before the close. */
  function windowStart(): number {
    if (!Number.isFinite(windowS)) return Number.NEGATIVE_INFINITY;
    return Number.isFinite(tClose) ? tClose - windowS : lastT - windowS;
  }

  /** Slides the window to its start time and takes newly completed blocks into the sums. */
  function slide(): void {
    const start = windowStart();
    while (i0 < n && (ts[i0] as number) < start) i0++;
    const first = Math.ceil(i0 / BLOCK);
    while (kFirst < first) {
      if (kFirst < kDone) removeBlock(kFirst);
      kFirst++;
    }
    if (kDone < kFirst) kDone = kFirst;
    while ((kDone + 1) * BLOCK <= n) {
      linearise(kDone, false);
      kDone++;
    }
  }

  /** Rebuilds the window from scratch (the close changed the model, or the window moved back). */
  function rebuild(): void {
    const start = windowStart();
    i0 = 0;
    while (i0 < n && (ts[i0] as number) < start) i0++;
    kFirst = Math.ceil(i0 / BLOCK);
    kDone = kFirst;
    rr = kFirst;
    sumA.fill(0);
    sumC.fill(0);
  }

  /**
   * One Gauss–Newton iteration: normal equations from the sums, the exact partial blocks and the
   * priors; solved by Cholesky after Jacobi scaling; the covariance is the inverse. `all`
   * re-linearises every block. Returns false when the equations are singular (no step taken).
   */
  function iterate(all: boolean): boolean {
    slide();
    const blocks = kDone - kFirst;
    if (all || relinearise) {
      for (let k = kFirst; k < kDone; k++) linearise(k, true);
      resum();
      relinearise = false;
    } else {
      const count = Math.min(REFRESH_BLOCKS, blocks);
      for (let j = 0; j < count; j++) {
        if (rr < kFirst || rr >= kDone) {
          rr = kFirst;
          resum();
        }
        linearise(rr, true);
        rr++;
      }
    }
    normal.fill(0);
    rhs.fill(0);
    for (let p = 0; p < P; p++) {
      let sum = sumC[p] as number;
      for (let q = 0; q < P; q++) sum -= (sumA[p >= q ? p * M + q : q * M + p] as number) * (theta[q] as number);
      rhs[p] = sum;
      for (let q = 0; q <= p; q++) normal[p * M + q] = sumA[p * M + q] as number;
    }
    const headEnd = Math.min(kFirst * BLOCK, n);
    if (i0 < headEnd) accumulate(i0, headEnd, normal, rhs);
    const tailStart = Math.max(kDone * BLOCK, headEnd);
    if (tailStart < n) accumulate(tailStart, n, normal, rhs);
    for (let p = 0; p < P; p++) {
      const w = priorInfo[p] as number;
      normal[p * M + p] = (normal[p * M + p] as number) + w;
      rhs[p] = (rhs[p] as number) + w * ((priorMean[p] as number) - (theta[p] as number));
    }
    if (!solve()) return false;
    // Limit the step: u may move by at most maxStepNm at either end of the window.
    const move = n > 0 ? Math.max(moveAt(ts[i0] as number), moveAt(ts[n - 1] as number)) : 0;
    const alpha = move > maxStepNm ? maxStepNm / move : 1;
    for (let p = 0; p < P; p++) {
      const dp = alpha * (step[p] as number);
      lastStep[p] = dp;
      theta[p] = (theta[p] as number) + dp;
    }
    if (alpha * move > RELINEARISE_NM) relinearise = true;
    lastMoveNm = alpha * move;
    return true;
  }

  /** |Δu| at time t for the proposed step. */
  function moveAt(time: number): number {
    const t = time < tClose ? time : tClose;
    return Math.abs((step[D0] as number) + (step[RATE] as number) * t);
  }

  /**
   * Solves normal · step = rhs (lower triangle given) and writes the inverse into cov, by
   * Cholesky factorisation of the Jacobi-scaled matrix (Golub and Van Loan, *Matrix
   * Computations*, 4.2). False when it is not positive definite.
   */
  function solve(): boolean {
    for (let p = 0; p < P; p++) {
      const d = normal[p * M + p] as number;
      if (!(d > 0)) return false;
      scale[p] = 1 / Math.sqrt(d);
    }
    for (let i = 0; i < P; i++) {
      for (let j = 0; j <= i; j++) {
        let sum = (normal[i * M + j] as number) * (scale[i] as number) * (scale[j] as number);
        for (let k = 0; k < j; k++) sum -= (chol[i * M + k] as number) * (chol[j * M + k] as number);
        if (i === j) {
          if (!(sum > 1e-14)) return false;
          chol[i * M + i] = Math.sqrt(sum);
        } else {
          chol[i * M + j] = sum / (chol[j * M + j] as number);
        }
      }
    }
    // Forward and back substitution on the scaled right-hand side.
    for (let i = 0; i < P; i++) {
      let sum = (rhs[i] as number) * (scale[i] as number);
      for (let k = 0; k < i; k++) sum -= (chol[i * M + k] as number) * (step[k] as number);
      step[i] = sum / (chol[i * M + i] as number);
    }
    for (let i = P - 1; i >= 0; i--) {
      let sum = step[i] as number;
      for (let k = i + 1; k < P; k++) sum -= (chol[k * M + i] as number) * (step[k] as number);
      step[i] = sum / (chol[i * M + i] as number);
    }
    for (let i = 0; i < P; i++) step[i] = (step[i] as number) * (scale[i] as number);
    // Inverse: L⁻¹ in place of tmpA (lower), then Σ = D L⁻ᵀ L⁻¹ D.
    tmpA.fill(0);
    for (let i = 0; i < P; i++) {
      tmpA[i * M + i] = 1 / (chol[i * M + i] as number);
      for (let j = 0; j < i; j++) {
        let sum = 0;
        for (let k = j; k < i; k++) sum -= (chol[i * M + k] as number) * (tmpA[k * M + j] as number);
        tmpA[i * M + j] = sum / (chol[i * M + i] as number);
      }
    }
    for (let i = 0; i < P; i++) {
      for (let j = 0; j <= i; j++) {
        let sum = 0;
        for (let k = i; k < P; k++) sum += (tmpA[k * M + i] as number) * (tmpA[k * M + j] as number);
        const value = sum * (scale[i] as number) * (scale[j] as number);
        cov[i * M + j] = value;
        cov[j * M + i] = value;
      }
    }
    return true;
  }

  function thicknessAt(timeS: number): number {
    const t = timeS < tClose ? timeS : tClose;
    return (theta[D0] as number) + (theta[RATE] as number) * t;
  }

  function sigmaAt(timeS: number): number {
    const t = timeS < tClose ? timeS : tClose;
    const v = (cov[0] as number) + 2 * t * (cov[1] as number) + t * t * (cov[M + 1] as number);
    return v > 0 ? Math.sqrt(v) : 0;
  }

  return {
    add(timeS: number, value: number): void {
      if (!Number.isFinite(value) || !Number.isFinite(timeS) || timeS < rampS) return;
      if (n === capacity) grow();
      ts[n] = timeS;
      ys[n] = value;
      flags[n] = 0;
      n++;
      if (timeS > lastT) lastT = timeS;
    },

    update(): void {
      if (n === 0) return;
      for (let it = 0; it < ITERATIONS; it++) {
        if (!iterate(false)) break;
        if (lastMoveNm < SETTLED_SIGMA * sigmaAt(lastT)) break;
      }
    },

    estimate(timeS: number): LayerEstimate {
      return {
        thicknessNm: thicknessAt(timeS),
        sigmaNm: sigmaAt(timeS),
        rateNmPerS: theta[RATE] as number,
        gain: theta[GAIN] as number,
        offset: theta[OFFSET] as number,
        indexFactor: theta[INDEX] as number,
        spikes,
        readings: n - i0,
      };
    },

    cutTimeS(target: number, shutterDelayS: number): number {
      const r = theta[RATE] as number;
      if (!(r > 0)) return Number.POSITIVE_INFINITY;
      // d₀ + r·t_target = target; the command goes out one shutter delay earlier.
      return (target - (theta[D0] as number)) / r - shutterDelayS;
    },

    readings() {
      return { times: ts.subarray(0, n), values: ys.subarray(0, n), spikes: flags.subarray(0, n) };
    },

    finalThickness(closeTimeS: number) {
      tClose = closeTimeS;
      rebuild();
      for (let it = 0; it < MAX_FINAL_ITERATIONS; it++) {
        if (!iterate(true)) break;
        let largest = 0;
        for (let p = 0; p < P; p++) {
          const sd = Math.sqrt(cov[p * M + p] as number);
          if (sd > 0) largest = Math.max(largest, Math.abs(lastStep[p] as number) / sd);
        }
        // Settled: the last step moved every parameter by under a millionth of its rms.
        if (largest < 1e-6) break;
      }
      const sd = (p: number): number => (p < P && (cov[p * M + p] as number) > 0 ? Math.sqrt(cov[p * M + p] as number) : 0);
      return {
        thicknessNm: thicknessAt(closeTimeS),
        sigmaNm: sigmaAt(closeTimeS),
        rateNmPerS: theta[RATE] as number,
        rateSigma: sd(RATE),
        indexFactor: theta[INDEX] as number,
        indexSigma: sd(INDEX),
        gain: theta[GAIN] as number,
        gainSigma: sd(GAIN),
        offset: theta[OFFSET] as number,
        offsetSigma: sd(OFFSET),
      };
    },
  };
}
