/**
 * Which monitor wavelength cuts each optical layer most precisely: the fit's precision bound
 * (precision.ts) for every wavelength of the monitor's range, from a coarser curve (48 steps
 * across the layer, one wavelength, no pass-band averaging) so that hundreds of wavelengths
 * per layer stay cheap. The layers below are carried as one matrix per wavelength, extended
 * layer by layer.
 *
 * Only wavelengths a recipe may name are searched: the monitor's pass band (± its bandwidth)
 * inside the data of the chip's substrate and of every layer on the chip up to this one, the
 * condition `resolveRecipe` checks (`monitorBandProblem`).
 */
import { buildOpticalModel, createOpticalResult, layersMatrix, resultFromMatrix, type OpticalModel } from '../optics/optical-model.ts';
import { fitPrecisionBound, type FitPriors } from './precision.ts';
import { monitorBandProblem, type LayerRecipe, type ResolvedRecipe } from './recipe.ts';

export interface SearchSettings {
  stepNm: number;
  noise: number;
  sampleRateHz: number;
  priors: FitPriors;
}

export interface WavelengthSearch {
  /** The common grid, nm. */
  gridNm: Float64Array;
  byLayer: Map<number, LayerSearch>;
}

/** One layer's search: precision (% of thickness) at every grid wavelength (∞ where unusable), and the best. */
export interface LayerSearch {
  precisionPercent: Float64Array;
  wavelengthNm: number;
  bestPercent: number;
}

const SEARCH_INTERVALS = 48;

export function searchWavelengths(
  recipe: ResolvedRecipe,
  chipNm: readonly number[],
  layerNumbers: readonly number[],
  settings: SearchSettings,
): WavelengthSearch {
  const [lo, hi] = recipe.monitor.rangeNm;
  const count = Math.floor((hi - lo) / settings.stepNm + 1e-9) + 1;
  const gridNm = Float64Array.from({ length: count }, (_, i) => lo + i * settings.stepNm);
  const byLayer = new Map<number, LayerSearch>();
  const wanted = new Set(layerNumbers);
  const result = createOpticalResult();
  const matrix = new Float64Array(8);
  const samples = new Float64Array(SEARCH_INTERVALS + 1);
  const scratch = new Float64Array(16);

  for (const chip of recipe.chips) {
    const chipLayers = recipe.layers.slice(chip.fromLayer - 1, chip.toLayer);
    if (!chipLayers.some((l) => wanted.has(l.number))) continue;
    // Wavelengths where every medium on this chip has data.
    let wLo = Math.max(lo, chip.validRangeNm[0]);
    let wHi = Math.min(hi, chip.validRangeNm[1]);
    for (const l of chipLayers) {
      wLo = Math.max(wLo, l.validRangeNm[0]);
      wHi = Math.min(wHi, l.validRangeNm[1]);
    }
    const first = gridNm.findIndex((w) => w >= wLo);
    const usable = gridNm.filter((w) => w >= wLo && w <= wHi);
    if (usable.length === 0 || first < 0) continue;
    const thickness = Float64Array.from(chipLayers, (l) => chipNm[l.number - 1] as number);
    const models = new Map<number, { model: OpticalModel; base: Float64Array[]; included: number }>();
    const modelFor = (angleDeg: number): { model: OpticalModel; base: Float64Array[]; included: number } => {
      let entry = models.get(angleDeg);
      if (!entry) {
        const model = buildOpticalModel(
          {
            incident: recipe.incident,
            layers: chipLayers.map((l) => ({ dispersion: l.dispersion, thicknessNm: 0 })),
            substrate: chip.substrate,
            back: chip.back === 'incoherent' ? 'incoherent' : 'semi-infinite',
            ...(chip.back === 'incoherent' ? { substrateThicknessNm: chip.thicknessMm * 1e6 } : {}),
          },
          usable,
          angleDeg,
        );
        const pols = angleDeg === 0 ? 1 : 2;
        const base = Array.from({ length: usable.length * pols }, () => Float64Array.of(1, 0, 0, 0, 0, 0, 1, 0));
        entry = { model, base, included: 0 };
        models.set(angleDeg, entry);
      }
      return entry;
    };

    chipLayers.forEach((layer: LayerRecipe, k) => {
      if (!wanted.has(layer.number)) return;
      const entry = modelFor(layer.angleDeg);
      const pols: readonly ('s' | 'p')[] = layer.angleDeg === 0 ? ['s'] : ['s', 'p'];
      // Extend the layers-below matrices up to (not including) this layer.
      for (let w = 0; w < usable.length; w++) {
        for (let p = 0; p < pols.length; p++) {
          const b = entry.base[w * pols.length + p] as Float64Array;
          layersMatrix(b, entry.model, w, pols[p] as 's' | 'p', thickness, entry.included, k, b);
        }
      }
      entry.included = k;
      const target = thickness[k] as number;
      const step = target / SEARCH_INTERVALS;
      const chipRate = layer.rateNmPerS * layer.chipRatio;
      const precision = new Float64Array(gridNm.length).fill(Number.POSITIVE_INFINITY);
      const saved = thickness[k] as number;
      let best = Number.POSITIVE_INFINITY;
      let bestW = Number.NaN;
      const signalAt = (w: number, d: number): number => {
        thickness[k] = d;
        let s = 0;
        for (let p = 0; p < pols.length; p++) {
          const pol = pols[p] as 's' | 'p';
          layersMatrix(matrix, entry.model, w, pol, thickness, k, k + 1, entry.base[w * pols.length + p]);
          resultFromMatrix(result, entry.model, w, pol, matrix);
          s += layer.signal === 'transmission' ? result.T : result.R;
        }
        return s / pols.length;
      };
      const onChip = chipLayers.slice(0, k + 1);
      for (let w = 0; w < usable.length; w++) {
        if (monitorBandProblem(usable[w] as number, layer.bandwidthNm, chip, onChip) !== undefined) continue;
        for (let i = 0; i <= SEARCH_INTERVALS; i++) samples[i] = signalAt(w, i * step);
        const sigma = fitPrecisionBound(samples, SEARCH_INTERVALS + 1, step, chipRate, settings.sampleRateHz, settings.noise, settings.priors, scratch);
        const percent = (100 * sigma) / target;
        precision[first + w] = percent;
        if (percent < best) {
          best = percent;
          bestW = usable[w] as number;
        }
      }
      thickness[k] = saved;
      byLayer.set(layer.number, { precisionPercent: precision, wavelengthNm: bestW, bestPercent: best });
    });
  }
  return { gridNm, byLayer };
}

/**
 * One wavelength per optical layer for the whole run, minimising Σ precision² (in %²) plus
 * `changePenalty` for every change of wavelength between consecutive optical layers
 * (dynamic programming over the grid, exact for this cost).
 */
export function wholeRunWavelengths(
  search: WavelengthSearch,
  layerNumbers: readonly number[],
  changePenalty: number,
): { byLayer: Map<number, number>; wavelengthsNm: number[]; changes: number } {
  const grid = search.gridNm;
  const n = grid.length;
  const rows = layerNumbers.map((num) => search.byLayer.get(num)?.precisionPercent);
  const layers = layerNumbers.filter((_, i) => rows[i] !== undefined);
  const costs = rows.filter((r): r is Float64Array => r !== undefined);
  const from: Int32Array[] = [];
  let cost = new Float64Array(n);
  for (let j = 0; j < costs.length; j++) {
    const row = costs[j] as Float64Array;
    const next = new Float64Array(n);
    const back = new Int32Array(n);
    let bestPrev = 0;
    for (let w = 1; w < n; w++) if ((cost[w] as number) < (cost[bestPrev] as number)) bestPrev = w;
    for (let w = 0; w < n; w++) {
      const stay = cost[w] as number;
      const move = (cost[bestPrev] as number) + (j === 0 ? 0 : changePenalty);
      const p = row[w] as number;
      next[w] = (stay <= move ? stay : move) + p * p;
      back[w] = stay <= move ? w : bestPrev;
    }
    from.push(back);
    cost = next;
  }
  let w = 0;
  for (let k = 1; k < n; k++) if ((cost[k] as number) < (cost[w] as number)) w = k;
  const chosen = new Array<number>(costs.length);
  for (let j = costs.length - 1; j >= 0; j--) {
    chosen[j] = w;
    w = (from[j] as Int32Array)[w] as number;
  }
  const byLayer = new Map<number, number>();
  let changes = 0;
  chosen.forEach((idx, j) => {
    byLayer.set(layers[j] as number, grid[idx] as number);
    if (j > 0 && idx !== chosen[j - 1]) changes++;
  });
  return { byLayer, wavelengthsNm: chosen.map((idx) => grid[idx] as number), changes };
}
