/**
 * The optical monitor's view of a witness chip: the signal (T or R) of the chip with its earlier
 * layers and a growing top layer, at the monitor wavelength averaged over the monitor's pass band.
 *
 * The layers below the growing one are fixed for the whole layer, so their characteristic
 * matrix is computed once; each new thickness then costs one layer matrix per sub-wavelength.
 */
import type { Dispersion } from '../optics/dispersion.ts';
import {
  buildOpticalModel,
  createOpticalResult,
  layersMatrix,
  resultFromMatrix,
  type OpticalModel,
} from '../optics/optical-model.ts';

export interface ChipMonitorSpec {
  readonly incident: Dispersion;
  readonly substrate: Dispersion;
  /** `incoherent`: a chip with a bare back face; `none`: semi-infinite. */
  readonly back: 'incoherent' | 'none';
  readonly substrateThicknessNm: number;
  /** Layers already on the chip, deposition order (thickness on the chip, nm). */
  readonly below: readonly { readonly dispersion: Dispersion; readonly thicknessNm: number }[];
  readonly growing: Dispersion;
  readonly wavelengthNm: number;
  /** FWHM of the triangular pass band, nm; 0 for a single wavelength. */
  readonly bandwidthNm: number;
  readonly angleDeg: number;
  readonly signal: 'transmission' | 'reflection';
}

export interface ChipMonitor {
  /** The monitor signal (fraction 0..1) with the growing layer `thicknessNm` thick on the chip. */
  signalAt(thicknessNm: number): number;
  readonly spec: ChipMonitorSpec;
}

/** Half-count of sub-wavelengths on each side of the centre (5 in all: a 2 nm band is smooth). */
const HALF_SAMPLES = 2;

/**
 * Sub-wavelengths and weights for a triangular pass band of full width at half maximum
 * `fwhmNm` (a grating monochromator with equal entrance and exit slits; common practice, no
 * source). Nodes at multiples of FWHM/(m + 1) out to the base, weights 1 − |x|/FWHM,
 * normalised. Symmetric, so a linear trend averages to its centre value.
 */
export function passBand(centreNm: number, fwhmNm: number): { wavelengthsNm: Float64Array; weights: Float64Array } {
  if (!(fwhmNm > 0)) return { wavelengthsNm: Float64Array.of(centreNm), weights: Float64Array.of(1) };
  const count = 2 * HALF_SAMPLES + 1;
  const wavelengthsNm = new Float64Array(count);
  const weights = new Float64Array(count);
  let sum = 0;
  for (let i = 0; i < count; i++) {
    const j = i - HALF_SAMPLES;
    const x = (j / (HALF_SAMPLES + 1)) * fwhmNm;
    wavelengthsNm[i] = centreNm + x;
    weights[i] = 1 - Math.abs(x) / fwhmNm;
    sum += weights[i] as number;
  }
  for (let i = 0; i < count; i++) weights[i] = (weights[i] as number) / sum;
  return { wavelengthsNm, weights };
}

export function buildChipMonitor(spec: ChipMonitorSpec): ChipMonitor {
  const band = passBand(spec.wavelengthNm, spec.bandwidthNm);
  const layers = [...spec.below, { dispersion: spec.growing, thicknessNm: 0 }];
  const model: OpticalModel = buildOpticalModel(
    {
      incident: spec.incident,
      layers,
      substrate: spec.substrate,
      back: spec.back === 'incoherent' ? 'incoherent' : 'semi-infinite',
      ...(spec.back === 'incoherent' ? { substrateThicknessNm: spec.substrateThicknessNm } : {}),
    },
    band.wavelengthsNm,
    spec.angleDeg,
  );
  const top = layers.length - 1;
  const thickness = Float64Array.from(model.thicknessNm);
  // At normal incidence s and p coincide; otherwise the monitor's light is unpolarised.
  const pols: readonly ('s' | 'p')[] = spec.angleDeg === 0 ? ['s'] : ['s', 'p'];
  const nW = band.wavelengthsNm.length;
  const below = new Float64Array(nW * pols.length * 8);
  for (let w = 0; w < nW; w++) {
    for (let p = 0; p < pols.length; p++) {
      layersMatrix(below.subarray((w * pols.length + p) * 8, (w * pols.length + p + 1) * 8), model, w, pols[p] as 's' | 'p', thickness, 0, top);
    }
  }
  const bases = Array.from({ length: nW * pols.length }, (_, i) => below.subarray(i * 8, i * 8 + 8));
  const matrix = new Float64Array(8);
  const result = createOpticalResult();
  const weights = band.weights;
  const transmission = spec.signal === 'transmission';
  const polWeight = 1 / pols.length;

  return {
    spec,
    signalAt(thicknessNm: number): number {
      thickness[top] = thicknessNm;
      let sum = 0;
      for (let w = 0; w < nW; w++) {
        for (let p = 0; p < pols.length; p++) {
          const pol = pols[p] as 's' | 'p';
          layersMatrix(matrix, model, w, pol, thickness, top, top + 1, bases[w * pols.length + p]);
          resultFromMatrix(result, model, w, pol, matrix);
          sum += (weights[w] as number) * polWeight * (transmission ? result.T : result.R);
        }
      }
      return sum;
    },
  };
}

export interface TurningPoint {
  /** Thickness of the growing layer on the chip, nm. */
  thicknessNm: number;
  signal: number;
  kind: 'maximum' | 'minimum';
}

/**
 * The extrema of the signal over `samples` (values at `i · stepNm`), each refined to a root of
 * the central-difference slope by the Illinois variant of regula falsi (Dowell and Jarratt,
 * BIT 11, 168 (1971)), until a step moves it by less than 1e-9 nm. Found from the curve itself: turning points lie at
 * quarter-waves only on a real admittance.
 */
export function findTurningPoints(monitor: ChipMonitor, samples: Float64Array, stepNm: number): TurningPoint[] {
  const out: TurningPoint[] = [];
  const h = 1e-3; // nm; the slope's truncation error is O(h²), far below the refinement
  const slope = (d: number): number => monitor.signalAt(d + h) - monitor.signalAt(d - h);
  for (let i = 1; i + 1 < samples.length; i++) {
    const a = samples[i - 1] as number;
    const b = samples[i] as number;
    const c = samples[i + 1] as number;
    const isMax = b > a && b >= c;
    const isMin = b < a && b <= c;
    if (!isMax && !isMin) continue;
    let lo = (i - 1) * stepNm;
    let hi = (i + 1) * stepNm;
    let fLo = slope(lo);
    let fHi = slope(hi);
    let d = 0.5 * (lo + hi);
    if (fLo * fHi < 0) {
      let side = 0;
      for (let k = 0; k < 100; k++) {
        const next = (lo * fHi - hi * fLo) / (fHi - fLo);
        const converged = Math.abs(next - d) < 1e-9;
        d = next;
        if (converged) break;
        const f = slope(d);
        if (f === 0) break;
        if (f * fLo > 0) {
          lo = d;
          fLo = f;
          if (side === -1) fHi /= 2; // Illinois: halve the stale end
          side = -1;
        } else {
          hi = d;
          fHi = f;
          if (side === 1) fLo /= 2;
          side = 1;
        }
      }
    }
    out.push({ thicknessNm: d, signal: monitor.signalAt(d), kind: isMax ? 'maximum' : 'minimum' });
  }
  return out;
}
