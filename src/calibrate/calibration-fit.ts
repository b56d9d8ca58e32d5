/**
 * The chamber's calibration from finished runs: one least-squares fit of the physics to
 * everything recorded (issue 11). Pure: no I/O.
 *
 * Unknowns. Per material m (shared by every run pooled): the index factor f_m (n_film = f_m ·
 * n_library at every wavelength, as the virtual chamber applies it), the chip ratio ρ_m (chip
 * thickness / part thickness) and the tooling factor τ_m (part thickness / crystal thickness).
 * Per run and layer k: the part thickness p_k. Per run, nuisances: the optical monitor's gain and
 * offset, each with a linear drift in run time; the crystal's frequency offset C (bare frequency
 * and the steady heat load of the pauses) and its warm-up H at the pause before the first layer
 * (the sources not yet hot).
 *
 * Data and model (each datum weighted by its noise, estimated from the data themselves):
 * - optical readings of layer k, bin means on the layer's growth clock u (run-data.ts), each
 *   modelled as the mean over its bin:
 *   y = (g₀ + g₁t)·S_k(ρ_m·p_k·u) + o₀ + o₁t, S_k the chip monitor of layer k over the chip's
 *   earlier layers at ρ·p and f (chipMonitorFor: the plan's own optics);
 * - the crystal's frequency in each pause: F_j = f(stack of p_i/τ_i, i ≤ j) + C (+ H before the
 *   first layer), by the multilayer acoustic model (stackFrequencyHz);
 * - each measured spectrum of the parts: T or R of the design's stack with p_k and f_m, over the
 *   measured wavelengths (the substrate and its back face as the design gives them).
 * Without a measured spectrum the monitor sees ρ·p and the crystal p/τ: ρ·τ is known, ρ and τ
 * apart only as well as their priors; the correlation table and the warnings say so.
 *
 * Weak priors keep every direction bounded (f ± 5 %, ρ and τ ± 10 % of the recipe's, p ± 20 % of
 * the target, gains ± 5 %): they are counted in the covariance, so a direction the data do not
 * fix shows the prior's width, never a false precision. Levenberg–Marquardt (Marquardt, J. SIAM
 * 11, 431 (1963); from memory) on forward differences, with the dense Cholesky of dense.ts; the
 * covariance is the inverse of the undamped normal matrix, scaled by the reduced χ² when that
 * exceeds 1 (Birge's ratio: the model missed something, so the sigmas widen).
 */
import { stackFrequencyHz } from '../model/crystal/crystal.ts';
import { inverse, solveDamped } from '../model/numeric/dense.ts';
import { scaledDispersion } from '../model/optics/dispersion.ts';
import { buildOpticalModel, spectrum, type StackSpec } from '../model/optics/optical-model.ts';
import { chipMonitorFor } from '../model/plan/plan.ts';
import type { LayerRecipe, ResolvedRecipe } from '../model/plan/recipe.ts';
import type { MeasuredSpectrum } from './measured-spectrum.ts';
import { differenceNoise, type RunData } from './run-data.ts';

export interface ValueSigma {
  readonly value: number;
  readonly sigma: number;
}

export interface MaterialCalibration {
  readonly indexFactor: ValueSigma;
  readonly chipRatio: ValueSigma;
  readonly toolingFactor: ValueSigma;
  /**
   * The share of each factor's variance that its priors (and those of the parameters it is
   * tied to) give, 0..1: above PRIOR_DOMINATED the sigma is the prior's width seen through the
   * correlations, not what the data say, and the factor is flagged as hardly told.
   */
  readonly priorShare: { readonly indexFactor: number; readonly chipRatio: number; readonly toolingFactor: number };
  /** What the first pooled run's recipe said. */
  readonly recipeChipRatio: number;
  readonly recipeToolingFactor: number;
}

export interface LayerCalibration {
  /** Index of the run among those pooled (0 for one run). */
  readonly run: number;
  readonly number: number;
  readonly material: string;
  readonly targetNm: number;
  readonly partNm: number;
  readonly sigmaNm: number;
}

export interface DataResidual {
  readonly data: string;
  readonly points: number;
  /** rms of the residuals in the data's own unit (fraction for optical and spectra, Hz for the crystal). */
  readonly rms: number;
  /** rms of the residuals over their noise: about 1 when the model holds. */
  readonly ratio: number;
}

export interface CalibrationResult {
  readonly materials: Readonly<Record<string, MaterialCalibration>>;
  readonly layers: readonly LayerCalibration[];
  readonly residuals: readonly DataResidual[];
  /** Names of the material parameters, and their correlation matrix (row-major). */
  readonly correlation: { readonly names: readonly string[]; readonly matrix: readonly (readonly number[])[] };
  readonly warnings: readonly string[];
  readonly iterations: number;
  /** The covariance scale applied (≥ 1). */
  readonly birgeRatio: number;
  /** Per pooled run, the optical monitor's fitted drifts: gain (fraction of the gain) and offset (fraction of full scale), per hour. */
  readonly monitorDrifts: readonly { readonly gainPerHour: number; readonly offsetPerHour: number }[];
}

export interface SpectrumData {
  /** Which pooled run's parts it measures. */
  readonly run: number;
  readonly spectrum: MeasuredSpectrum;
}

export interface CalibrationOptions {
  maxIterations?: number;
}

/** Prior widths (common practice, no source: a chamber a calibration is due on is a few per cent off at most). */
export const CALIBRATION_PRIORS = {
  indexFactor: 0.05,
  chipRatio: 0.1,
  toolingFactor: 0.1,
  partThickness: 0.2,
  gain: 0.05,
  gainDriftPerHour: 0.05,
  offset: 0.02,
  offsetDriftPerHour: 0.02,
  crystalOffsetHz: 1e4,
  crystalWarmUpHz: 5,
} as const;

/**
 * Added in quadrature to each pause level's noise, Hz: what the heat load of a pause differs
 * from the others by (pauses of slightly different lengths after layers of different lengths;
 * common practice, no source).
 */
export const CRYSTAL_LEVEL_FLOOR_HZ = 0.2;

/**
 * Added in quadrature to each optical bin's noise, fraction of full scale: what the model of a
 * bin misses however many readings it averages — the crystal clock's heat transient at each
 * opening, the clock's residual bend (run-data.ts). Without it the Monte Carlo of the index
 * factors on the mirror gave errors 1.5× their sigmas; with it, honest (DEVELOPERS.md).
 */
export const OPTICAL_MODEL_FLOOR = 1.5e-4;

/** Share of a factor's variance from the priors above which the data are said to hardly tell it. */
export const PRIOR_DOMINATED = 0.5;

/** |correlation| above which two parameters are reported as not separated by the data. */
export const UNSEPARATED_CORRELATION = 0.9;

const MATERIAL_PARAMS = 3;
const RUN_NUISANCES = 6; // g₀, g₁, o₀, o₁, C, H

interface Block {
  readonly rows: number;
  readonly offset: number;
  /** Observed values, and √weight. */
  readonly y: Float64Array;
  readonly sqrtW: Float64Array;
  readonly dataset: number;
  predict(theta: Float64Array, out: Float64Array): void;
}

export function calibrate(runs: readonly RunData[], spectra: readonly SpectrumData[], options: CalibrationOptions = {}): CalibrationResult {
  if (runs.length === 0) throw new Error('calibrate needs at least one run');
  const warnings: string[] = runs.flatMap((r) => r.warnings);

  // ---- parameters
  const materialNames: string[] = [];
  const firstLayerOf = new Map<string, LayerRecipe>();
  for (const run of runs) {
    for (const l of run.recipe.layers) {
      if (!firstLayerOf.has(l.materialName)) {
        firstLayerOf.set(l.materialName, l);
        materialNames.push(l.materialName);
      }
    }
  }
  const M = materialNames.length;
  const materialOf = (l: LayerRecipe): number => materialNames.indexOf(l.materialName);
  const fAt = (m: number): number => MATERIAL_PARAMS * m;
  const rhoAt = (m: number): number => MATERIAL_PARAMS * m + 1;
  const tauAt = (m: number): number => MATERIAL_PARAMS * m + 2;
  const rhoRecipe = materialNames.map((n) => (firstLayerOf.get(n) as LayerRecipe).chipRatio);
  const tauRecipe = materialNames.map((n) => (firstLayerOf.get(n) as LayerRecipe).toolingFactor);

  /** Per run: where its part thicknesses start (−1 for a layer never deposited) and its nuisances. */
  const runLayout = runs.map(() => ({ partAt: [] as number[], nuisanceAt: 0 }));
  let P = MATERIAL_PARAMS * M;
  runs.forEach((run, r) => {
    const deposited = new Set(run.layers.map((l) => l.index));
    const layout = runLayout[r] as { partAt: number[]; nuisanceAt: number };
    layout.partAt = run.recipe.layers.map((_, i) => (deposited.has(i) ? P++ : -1));
    layout.nuisanceAt = P;
    P += RUN_NUISANCES;
  });
  const priorMean = new Float64Array(P);
  const priorSigma = new Float64Array(P);
  const step = new Float64Array(P).fill(1e-6);
  for (let m = 0; m < M; m++) {
    priorMean[fAt(m)] = 1;
    priorSigma[fAt(m)] = CALIBRATION_PRIORS.indexFactor;
    // ρ, τ and p are fitted as logarithms (ln of the value over the recipe's or the target):
    // the monitor sees ρ·p and the crystal p/τ, so the directions the data leave loose are
    // straight lines in logs (and curved valleys in the values, which LM crept along).
    priorSigma[rhoAt(m)] = CALIBRATION_PRIORS.chipRatio;
    priorSigma[tauAt(m)] = CALIBRATION_PRIORS.toolingFactor;
  }
  runs.forEach((run, r) => {
    const layout = runLayout[r] as { partAt: number[]; nuisanceAt: number };
    for (const at of layout.partAt) {
      if (at < 0) continue;
      priorSigma[at] = CALIBRATION_PRIORS.partThickness;
    }
    const n = layout.nuisanceAt;
    priorMean[n] = 1;
    priorSigma[n] = CALIBRATION_PRIORS.gain;
    priorSigma[n + 1] = CALIBRATION_PRIORS.gainDriftPerHour;
    priorSigma[n + 2] = CALIBRATION_PRIORS.offset;
    priorSigma[n + 3] = CALIBRATION_PRIORS.offsetDriftPerHour;
    priorSigma[n + 4] = CALIBRATION_PRIORS.crystalOffsetHz;
    priorSigma[n + 5] = CALIBRATION_PRIORS.crystalWarmUpHz;
    step[n + 4] = 1e-3;
    step[n + 5] = 1e-3;
    void run;
  });

  const theta = Float64Array.from(priorMean);
  // Start the thicknesses at the controller's own estimates where it made them.
  runs.forEach((run, r) => {
    const layout = runLayout[r] as { partAt: number[] };
    run.recipe.layers.forEach((l, i) => {
      const at = layout.partAt[i] as number;
      const est = run.estimatedNm[i] as number;
      if (at >= 0 && est > 0 && Math.abs(est / l.targetNm - 1) < 0.3) theta[at] = Math.log(est / l.targetNm);
    });
  });

  const partNmOf = (t: Float64Array, r: number): number[] => {
    const run = runs[r] as RunData;
    const layout = runLayout[r] as { partAt: number[] };
    return run.recipe.layers.map((l, i) => {
      const at = layout.partAt[i] as number;
      return at < 0 ? 0 : Math.exp(t[at] as number) * l.targetNm;
    });
  };

  // ---- data blocks, and which parameters each depends on
  const blocks: Block[] = [];
  const dependents: Set<number>[] = Array.from({ length: P }, () => new Set<number>());
  const datasetNames: string[] = [];
  let N = 0;
  const addBlock = (make: (offset: number) => Block, deps: Iterable<number>): void => {
    const block = make(N);
    N += block.rows;
    const b = blocks.length;
    blocks.push(block);
    for (const p of deps) dependents[p]?.add(b);
  };

  runs.forEach((run, r) => {
    const recipe = run.recipe;
    const layout = runLayout[r] as { partAt: number[]; nuisanceAt: number };
    const g = layout.nuisanceAt;
    const opticalSet = datasetNames.push(`${run.label}: optical monitor`) - 1;
    const crystalSet = datasetNames.push(`${run.label}: crystal`) - 1;
    for (const layer of run.layers) {
      const lr = recipe.layers[layer.index] as LayerRecipe;
      const chip = recipe.chips[lr.chip] as ResolvedRecipe['chips'][number];
      const deps: number[] = [g, g + 1, g + 2, g + 3];
      for (let j = chip.fromLayer - 1; j <= layer.index; j++) {
        const lj = recipe.layers[j] as LayerRecipe;
        const m = materialOf(lj);
        deps.push(fAt(m), rhoAt(m));
        if ((layout.partAt[j] as number) >= 0) deps.push(layout.partAt[j] as number);
      }
      const rows = layer.values.length;
      const sqrtW = Float64Array.from(layer.counts, (c) => 1 / Math.hypot(run.opticalNoise / Math.sqrt(c), OPTICAL_MODEL_FLOOR));
      let key: number[] = [];
      const signal = new Float64Array(rows);
      const nonlinear = deps.slice(4);
      const hours = Float64Array.from(layer.timesS, (t) => t / 3600);
      addBlock(
        (offset) => ({
          rows,
          offset,
          y: layer.values,
          sqrtW,
          dataset: opticalSet,
          predict(t, out) {
            const now = nonlinear.map((p) => t[p] as number);
            if (now.length !== key.length || now.some((v, i) => v !== key[i])) {
              key = now;
              const partNm = partNmOf(t, r);
              const indexFactors = recipe.layers.map((l) => t[fAt(materialOf(l))] as number);
              // chipMonitorFor puts the earlier layers at partNm × the recipe's chip ratio: give it ρ·p over that.
              const scaled = partNm.map((p, j) => {
                const lj = recipe.layers[j] as LayerRecipe;
                return (p * Math.exp(t[rhoAt(materialOf(lj))] as number) * (rhoRecipe[materialOf(lj)] as number)) / lj.chipRatio;
              });
              const m = materialOf(lr);
              const monitor = chipMonitorFor(recipe, layer.index, scaled, { indexFactors, growingIndexFactor: t[fAt(m)] as number });
              const chipNm = (partNm[layer.index] as number) * Math.exp(t[rhoAt(m)] as number) * (rhoRecipe[m] as number);
              // A bin's mean signal by the two-point Gauss rule over its clocks (nodes at the mean ± the
              // spread: exact to cubic terms for evenly spread readings). The signal at the mean clock
              // alone is low at every maximum and high at every minimum by S''·var/2, which shrank
              // the swings and biased the index factors.
              for (let i = 0; i < rows; i++) {
                const u = layer.clocks[i] as number;
                const spread = layer.clockSpreads[i] as number;
                signal[i] = spread > 0 ? 0.5 * (monitor.signalAt(chipNm * (u + spread)) + monitor.signalAt(chipNm * (u - spread))) : monitor.signalAt(chipNm * u);
              }
            }
            const g0 = t[g] as number;
            const g1 = t[g + 1] as number;
            const o0 = t[g + 2] as number;
            const o1 = t[g + 3] as number;
            for (let i = 0; i < rows; i++) {
              const h = hours[i] as number;
              out[i] = (g0 + g1 * h) * (signal[i] as number) + o0 + o1 * h;
            }
          },
        }),
        deps,
      );
    }
    if (run.levels.length >= 2) {
      const levels = run.levels;
      const rows = levels.length;
      const y = Float64Array.from(levels, (l) => l.frequencyHz - (levels[0] as { frequencyHz: number }).frequencyHz);
      const sqrtW = Float64Array.from(levels, (l) => 1 / Math.hypot(run.crystalNoiseHz / Math.sqrt(l.count), CRYSTAL_LEVEL_FLOOR_HZ));
      const f0 = recipe.crystal.bareFrequencyHz;
      const deps: number[] = [g + 4, g + 5];
      for (let m = 0; m < M; m++) deps.push(tauAt(m));
      for (const at of layout.partAt) if (at >= 0) deps.push(at);
      addBlock(
        (offset) => ({
          rows,
          offset,
          y,
          sqrtW,
          dataset: crystalSet,
          predict(t, out) {
            const partNm = partNmOf(t, r);
            const stack = recipe.layers.map((l, i) => ({
              thicknessNm: (partNm[i] as number) / (Math.exp(t[tauAt(materialOf(l))] as number) * (tauRecipe[materialOf(l)] as number)),
              densityGPerCm3: l.densityGPerCm3,
              zRatio: l.zRatio,
            }));
            const bare = stackFrequencyHz(f0, []);
            for (let i = 0; i < rows; i++) {
              const level = levels[i] as { after: number };
              out[i] = stackFrequencyHz(f0, stack.slice(0, level.after)) - bare + (t[g + 4] as number) + (level.after === 0 ? (t[g + 5] as number) : 0);
            }
          },
        }),
        deps,
      );
    } else warnings.push(`${run.label}: the crystal was not read in at least two pauses; the tooling factors rest on their priors`);
  });

  spectra.forEach((s, si) => {
    const run = runs[s.run] as RunData;
    const recipe = run.recipe;
    const layout = runLayout[s.run] as { partAt: number[] };
    // Only the wavelengths every medium of the stack has data for.
    let lo = 0;
    let hi = Number.POSITIVE_INFINITY;
    for (const l of recipe.layers) {
      lo = Math.max(lo, l.validRangeNm[0]);
      hi = Math.min(hi, l.validRangeNm[1]);
    }
    const keep: number[] = [];
    s.spectrum.wavelengthsNm.forEach((w, i) => {
      if (w >= lo && w <= hi) keep.push(i);
    });
    const source = s.spectrum.source;
    if (keep.length < s.spectrum.wavelengthsNm.length) {
      warnings.push(`${source}: ${s.spectrum.wavelengthsNm.length - keep.length} of its wavelengths lie outside the film data (${lo}–${hi} nm) and were left out`);
    }
    if (keep.length < 2) {
      warnings.push(`${source}: no measured wavelength lies within the film data; the spectrum was not used`);
      return;
    }
    const grid = Float64Array.from(keep, (i) => s.spectrum.wavelengthsNm[i] as number);
    const y = Float64Array.from(keep, (i) => s.spectrum.values[i] as number);
    const counts = Float64Array.from(keep, (i) => s.spectrum.counts[i] as number);
    // The noise of one point from the spectrum's own second differences (module run-data.ts).
    const noise = Math.max(1e-5, differenceNoise(y, 2));
    const sqrtW = Float64Array.from(counts, (c) => Math.sqrt(c) / noise);
    const set = datasetNames.push(`${source} (${s.spectrum.quantity}, ${run.label})`) - 1;
    const design = recipe.design.stack;
    const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
    const deps: number[] = [];
    for (let m = 0; m < M; m++) deps.push(fAt(m));
    for (const at of layout.partAt) if (at >= 0) deps.push(at);
    void si;
    addBlock(
      (offset) => ({
        rows: grid.length,
        offset,
        y,
        sqrtW,
        dataset: set,
        predict(t, target) {
          const partNm = partNmOf(t, s.run);
          const spec: StackSpec = {
            ...design,
            layers: recipe.layers.map((l, i) => ({ dispersion: scaledDispersion(l.dispersion, t[fAt(materialOf(l))] as number, 0), thicknessNm: partNm[i] as number })),
          };
          // At normal incidence s and p coincide.
          spectrum(out, buildOpticalModel(spec, grid, 0), 's');
          target.set(s.spectrum.quantity === 'T' ? out.T : out.R);
        },
      }),
      deps,
    );
  });

  // ---- Levenberg–Marquardt
  const predicted = new Float64Array(N);
  const predictAll = (t: Float64Array, out: Float64Array): void => {
    for (const b of blocks) b.predict(t, out.subarray(b.offset, b.offset + b.rows));
  };
  const costOf = (t: Float64Array, pred: Float64Array): number => {
    let cost = 0;
    for (const b of blocks) {
      for (let i = 0; i < b.rows; i++) cost += (((b.y[i] as number) - (pred[b.offset + i] as number)) * (b.sqrtW[i] as number)) ** 2;
    }
    for (let p = 0; p < P; p++) cost += (((t[p] as number) - (priorMean[p] as number)) / (priorSigma[p] as number)) ** 2;
    return cost;
  };
  predictAll(theta, predicted);
  let cost = costOf(theta, predicted);
  let lambda = 1e-3;
  let iterations = 0;
  let A: Float64Array;
  const maxIterations = options.maxIterations ?? 30;
  const columns: Float64Array[] = Array.from({ length: P }, () => new Float64Array(N));
  const scratch = new Float64Array(N);

  const buildNormal = (): Float64Array => {
    // Whitened Jacobian columns by forward differences, block by block (the blocks a parameter
    // does not touch keep a zero column).
    for (let p = 0; p < P; p++) {
      const col = columns[p] as Float64Array;
      col.fill(0);
      const h = step[p] as number;
      const saved = theta[p] as number;
      theta[p] = saved + h;
      for (const b of dependents[p] as Set<number>) {
        const block = blocks[b] as Block;
        const up = scratch.subarray(block.offset, block.offset + block.rows);
        block.predict(theta, up);
        for (let i = 0; i < block.rows; i++) col[block.offset + i] = (((up[i] as number) - (predicted[block.offset + i] as number)) / h) * (block.sqrtW[i] as number);
      }
      theta[p] = saved;
    }
    const normal = new Float64Array(P * P);
    const nonZero = columns.map((c) => {
      const rows: number[] = [];
      for (let i = 0; i < N; i++) if (c[i] !== 0) rows.push(i);
      return rows;
    });
    for (let p = 0; p < P; p++) {
      const cp = columns[p] as Float64Array;
      for (let q = 0; q <= p; q++) {
        const cq = columns[q] as Float64Array;
        const rows = (nonZero[p] as number[]).length < (nonZero[q] as number[]).length ? (nonZero[p] as number[]) : (nonZero[q] as number[]);
        let sum = 0;
        for (const i of rows) sum += (cp[i] as number) * (cq[i] as number);
        normal[p * P + q] = sum + (p === q ? 1 / (priorSigma[p] as number) ** 2 : 0);
      }
    }
    return normal;
  };

  let converged = false;
  while (!converged && iterations < maxIterations) {
    iterations++;
    A = buildNormal();
    const b = new Float64Array(P);
    const residual = new Float64Array(N);
    for (const block of blocks) {
      for (let i = 0; i < block.rows; i++) residual[block.offset + i] = ((block.y[i] as number) - (predicted[block.offset + i] as number)) * (block.sqrtW[i] as number);
    }
    for (let p = 0; p < P; p++) {
      const cp = columns[p] as Float64Array;
      let sum = 0;
      for (let i = 0; i < N; i++) sum += (cp[i] as number) * (residual[i] as number);
      b[p] = sum + ((priorMean[p] as number) - (theta[p] as number)) / (priorSigma[p] as number) ** 2;
    }
    let improved = false;
    for (let attempt = 0; attempt < 10; attempt++) {
      const delta = solveDamped(A, b, P, lambda);
      const trial = Float64Array.from(theta, (v, p) => v + (delta[p] as number));
      const trialPredicted = new Float64Array(N);
      predictAll(trial, trialPredicted);
      const trialCost = costOf(trial, trialPredicted);
      if (trialCost < cost) {
        const gain = cost - trialCost;
        theta.set(trial);
        predicted.set(trialPredicted);
        cost = trialCost;
        lambda = Math.max(lambda / 10, 1e-9);
        improved = true;
        // Settled when a step gains less than a tenth of one datum's χ² (χ² itself spreads by √(2N)).
        converged = gain < 0.1;
        break;
      }
      lambda *= 10;
    }
    predictAll(theta, predicted); // the blocks' memos back at θ
    if (!improved) break;
  }
  A = buildNormal();

  // ---- covariance, residuals
  const dataCount = N;
  let chi2Data = 0;
  const perSet = datasetNames.map(() => ({ n: 0, sum: 0, sumW: 0 }));
  for (const block of blocks) {
    const acc = perSet[block.dataset] as { n: number; sum: number; sumW: number };
    for (let i = 0; i < block.rows; i++) {
      const e = (block.y[i] as number) - (predicted[block.offset + i] as number);
      const w = e * (block.sqrtW[i] as number);
      acc.n++;
      acc.sum += e * e;
      acc.sumW += w * w;
      chi2Data += w * w;
    }
  }
  const dof = Math.max(1, dataCount - P);
  const birgeRatio = Math.max(1, Math.sqrt(chi2Data / dof));
  const cov = inverse(A, P);
  const scale = birgeRatio * birgeRatio;
  const sd = (p: number): number => Math.sqrt(Math.max(0, (cov[p * P + p] as number) * scale));
  // C = (H + Π)⁻¹ splits as C·H·C + C·Π·C: the second term is what the priors Π contribute to
  // the variance (a factor the data leave loose in some combination, say ρ·τ against the
  // thicknesses' common scale that only a spectrum pins, inherits the priors' widths there).
  const priorShare = (j: number): number => {
    let fromPriors = 0;
    for (let p = 0; p < P; p++) fromPriors += (cov[j * P + p] as number) ** 2 / (priorSigma[p] as number) ** 2;
    return Math.min(1, fromPriors / (cov[j * P + j] as number));
  };
  const residuals: DataResidual[] = datasetNames
    .map((data, i) => {
      const acc = perSet[i] as { n: number; sum: number; sumW: number };
      return { data, points: acc.n, rms: Math.sqrt(acc.sum / Math.max(1, acc.n)), ratio: Math.sqrt(acc.sumW / Math.max(1, acc.n)) };
    })
    .filter((r) => r.points > 0);
  if (birgeRatio > 1.5) {
    warnings.push(`the residuals are ${birgeRatio.toFixed(1)}× their noise: the model misses something in these runs; every sigma is widened by that factor`);
  }

  const materials: Record<string, MaterialCalibration> = {};
  materialNames.forEach((name, m) => {
    materials[name] = {
      indexFactor: { value: theta[fAt(m)] as number, sigma: sd(fAt(m)) },
      // From logs: σ(x) = x·σ(ln x).
      chipRatio: { value: Math.exp(theta[rhoAt(m)] as number) * (rhoRecipe[m] as number), sigma: sd(rhoAt(m)) * Math.exp(theta[rhoAt(m)] as number) * (rhoRecipe[m] as number) },
      toolingFactor: { value: Math.exp(theta[tauAt(m)] as number) * (tauRecipe[m] as number), sigma: sd(tauAt(m)) * Math.exp(theta[tauAt(m)] as number) * (tauRecipe[m] as number) },
      priorShare: { indexFactor: priorShare(fAt(m)), chipRatio: priorShare(rhoAt(m)), toolingFactor: priorShare(tauAt(m)) },
      recipeChipRatio: rhoRecipe[m] as number,
      recipeToolingFactor: tauRecipe[m] as number,
    };
  });
  const layers: LayerCalibration[] = [];
  runs.forEach((run, r) => {
    const layout = runLayout[r] as { partAt: number[] };
    run.recipe.layers.forEach((l, i) => {
      const at = layout.partAt[i] as number;
      if (at < 0) return;
      const partNm = Math.exp(theta[at] as number) * l.targetNm;
      layers.push({ run: r, number: l.number, material: l.materialName, targetNm: l.targetNm, partNm, sigmaNm: sd(at) * partNm });
    });
  });

  // ---- what the data cannot separate
  const names: string[] = [];
  const params: { p: number; name: string; prior: number }[] = [];
  materialNames.forEach((name, m) => {
    params.push({ p: fAt(m), name: `${name} index factor`, prior: CALIBRATION_PRIORS.indexFactor });
    params.push({ p: rhoAt(m), name: `${name} chip ratio`, prior: CALIBRATION_PRIORS.chipRatio });
    params.push({ p: tauAt(m), name: `${name} tooling factor`, prior: CALIBRATION_PRIORS.toolingFactor });
  });
  for (const q of params) names.push(q.name);
  const corr = (a: number, b: number): number => (cov[a * P + b] as number) / Math.sqrt((cov[a * P + a] as number) * (cov[b * P + b] as number));
  const matrix = params.map((a) => params.map((b) => corr(a.p, b.p)));
  let otherPairs = 0;
  for (let i = 0; i < params.length; i++) {
    for (let j = i + 1; j < params.length; j++) {
      const a = params[i] as { p: number; name: string };
      const b = params[j] as { p: number; name: string };
      const c = (matrix[i] as number[])[j] as number;
      if (Math.abs(c) < UNSEPARATED_CORRELATION) continue;
      // Within a material the pair is named; across materials (the common thickness scale the
      // spectrum pins) they are counted, and the table shows them.
      if (Math.floor(i / MATERIAL_PARAMS) !== Math.floor(j / MATERIAL_PARAMS)) {
        otherPairs++;
        continue;
      }
      // Both are logarithms, or near 1 (f): ln a ± ln b is the combination known best.
      const varA = cov[a.p * P + a.p] as number;
      const varB = cov[b.p * P + b.p] as number;
      const cAB = cov[a.p * P + b.p] as number;
      const sign = c < 0 ? 1 : -1;
      const sigma = Math.sqrt(Math.max(0, varA + varB + 2 * sign * cAB) * scale);
      const combination = sign > 0 ? `${a.name} × ${b.name}` : `${a.name} / ${b.name}`;
      warnings.push(
        `the data do not separate the ${a.name} from the ${b.name} (correlation ${c.toFixed(2)}): only ${combination} is known, to ±${(100 * sigma).toFixed(2)} %; each alone is known to ±${(100 * Math.sqrt(varA * scale)).toFixed(2)} % and ±${(100 * Math.sqrt(varB * scale)).toFixed(2)} %`,
      );
    }
  }
  if (otherPairs > 0) warnings.push(`${otherPairs} pair(s) of factors of different materials move together (|correlation| ≥ ${UNSEPARATED_CORRELATION}): see the correlation table; each factor's sigma already counts it`);
  for (const q of params) {
    const share = priorShare(q.p);
    if (sd(q.p) > 0.5 * q.prior || share > PRIOR_DOMINATED) {
      warnings.push(`the data hardly tell the ${q.name}: its sigma (${(100 * sd(q.p)).toFixed(2)} %) is ${(100 * share).toFixed(0)} % the priors' (its own ±${(100 * q.prior).toFixed(0)} % and those of what it is tied to), in variance`);
    }
  }
  if (spectra.length === 0) warnings.push('no measured spectrum was given: the chip ratios and tooling factors are known only as their products (measure the parts with --measured FILE.csv)');

  const monitorDrifts = runLayout.map(({ nuisanceAt: n }) => ({ gainPerHour: (theta[n + 1] as number) / (theta[n] as number), offsetPerHour: theta[n + 3] as number }));
  return { materials, layers, residuals, correlation: { names, matrix }, warnings, iterations, birgeRatio, monitorDrifts };
}
