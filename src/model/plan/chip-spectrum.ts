/**
 * A spectrometer's view of a witness chip: the chip's T or R with its earlier layers and a
 * growing top layer at every wavelength of the instrument's grid, each averaged over the
 * instrument's slit function (its resolution).
 *
 * As for the single-wavelength monitor (`chip-monitor.ts`), the layers below the growing one are
 * fixed for the whole layer: their characteristic matrix is computed once per (sub-)wavelength
 * when the view is built, and each spectrum then costs one layer matrix per sub-wavelength.
 */
import { buildOpticalModel, createOpticalResult, layersMatrix, resultFromMatrix } from '../optics/optical-model.ts';
import { passBand, type ChipMonitorSpec } from './chip-monitor.ts';

export type ChipSpectrumSpec = Omit<ChipMonitorSpec, 'wavelengthNm' | 'bandwidthNm'> & {
  /** The instrument's wavelengths, nm. */
  readonly gridNm: ArrayLike<number>;
  /** FWHM of the triangular slit function, nm; 0 for the value at each wavelength itself. */
  readonly resolutionNm: number;
};

export interface ChipSpectrum {
  /** Writes the spectrum (fraction 0..1 per grid wavelength) with the growing layer `thicknessNm` thick on the chip into `out`. */
  spectrumAt(out: Float64Array, thicknessNm: number): Float64Array;
  readonly spec: ChipSpectrumSpec;
}

/** The wavelengths of a range: from, from + step, … up to `toNm` inclusive (a step's rounding never drops the last). */
export function wavelengthRange(range: { readonly fromNm: number; readonly toNm: number; readonly stepNm: number }): Float64Array {
  const count = Math.floor((range.toNm - range.fromNm) / range.stepNm + 1e-9) + 1;
  return Float64Array.from({ length: count }, (_, i) => range.fromNm + i * range.stepNm);
}

export function buildChipSpectrum(spec: ChipSpectrumSpec): ChipSpectrum {
  const count = spec.gridNm.length;
  // Every grid wavelength's slit nodes, in one model: weights[i·nodes + j] for node j of wavelength i.
  const first = passBand(spec.gridNm[0] as number, spec.resolutionNm);
  const nodes = first.wavelengthsNm.length;
  const subNm = new Float64Array(count * nodes);
  const weights = new Float64Array(count * nodes);
  for (let i = 0; i < count; i++) {
    const band = passBand(spec.gridNm[i] as number, spec.resolutionNm);
    subNm.set(band.wavelengthsNm, i * nodes);
    weights.set(band.weights, i * nodes);
  }
  const layers = [...spec.below, { dispersion: spec.growing, thicknessNm: 0 }];
  const model = buildOpticalModel(
    {
      incident: spec.incident,
      layers,
      substrate: spec.substrate,
      back: spec.back === 'incoherent' ? 'incoherent' : 'semi-infinite',
      ...(spec.back === 'incoherent' ? { substrateThicknessNm: spec.substrateThicknessNm } : {}),
    },
    subNm,
    spec.angleDeg,
  );
  const top = layers.length - 1;
  const thickness = Float64Array.from(model.thicknessNm);
  // At normal incidence s and p coincide; otherwise the instrument's light is unpolarised.
  const pols: readonly ('s' | 'p')[] = spec.angleDeg === 0 ? ['s'] : ['s', 'p'];
  const nPol = pols.length;
  const below = new Float64Array(subNm.length * nPol * 8);
  const bases: Float64Array[] = [];
  for (let w = 0; w < subNm.length; w++) {
    for (let p = 0; p < nPol; p++) {
      const at = (w * nPol + p) * 8;
      bases.push(layersMatrix(below.subarray(at, at + 8), model, w, pols[p] as 's' | 'p', thickness, 0, top));
    }
  }
  const matrix = new Float64Array(8);
  const result = createOpticalResult();
  const transmission = spec.signal === 'transmission';
  const polWeight = 1 / nPol;

  return {
    spec,
    spectrumAt(out, thicknessNm) {
      thickness[top] = thicknessNm;
      for (let i = 0; i < count; i++) {
        let sum = 0;
        for (let j = 0; j < nodes; j++) {
          const w = i * nodes + j;
          for (let p = 0; p < nPol; p++) {
            const pol = pols[p] as 's' | 'p';
            layersMatrix(matrix, model, w, pol, thickness, top, top + 1, bases[w * nPol + p]);
            resultFromMatrix(result, model, w, pol, matrix);
            sum += (weights[w] as number) * polWeight * (transmission ? result.T : result.R);
          }
        }
        out[i] = sum;
      }
      return out;
    },
  };
}
