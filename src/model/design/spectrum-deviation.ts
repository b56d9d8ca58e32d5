/**
 * How far a deposited stack's spectrum lies from the design's over the design band: the largest
 * and the mean absolute difference in R and in T (fractions; ×100 for percentage points).
 */
import { buildOpticalModel, spectrum, type Polarisation, type StackSpec } from '../optics/optical-model.ts';

export interface SpectrumDeviation {
  fromNm: number;
  toNm: number;
  stepNm: number;
  maxAbsR: number;
  meanAbsR: number;
  maxAbsT: number;
  meanAbsT: number;
}

export function spectrumDeviation(
  design: StackSpec,
  deposited: StackSpec,
  band: { fromNm: number; toNm: number },
  options: { stepNm?: number; angleDeg?: number; pol?: Polarisation } = {},
): SpectrumDeviation & { wavelengthsNm: Float64Array; design: { R: Float64Array; T: Float64Array }; deposited: { R: Float64Array; T: Float64Array } } {
  const stepNm = options.stepNm ?? 1;
  const count = Math.floor((band.toNm - band.fromNm) / stepNm + 1e-9) + 1;
  const grid = Float64Array.from({ length: count }, (_, i) => band.fromNm + i * stepNm);
  const a = { R: new Float64Array(count), T: new Float64Array(count), A: new Float64Array(count) };
  const b = { R: new Float64Array(count), T: new Float64Array(count), A: new Float64Array(count) };
  spectrum(a, buildOpticalModel(design, grid, options.angleDeg ?? 0), options.pol ?? 'mean');
  spectrum(b, buildOpticalModel(deposited, grid, options.angleDeg ?? 0), options.pol ?? 'mean');
  let maxR = 0;
  let maxT = 0;
  let sumR = 0;
  let sumT = 0;
  for (let i = 0; i < count; i++) {
    const dR = Math.abs((a.R[i] as number) - (b.R[i] as number));
    const dT = Math.abs((a.T[i] as number) - (b.T[i] as number));
    maxR = Math.max(maxR, dR);
    maxT = Math.max(maxT, dT);
    sumR += dR;
    sumT += dT;
  }
  return {
    fromNm: band.fromNm,
    toNm: band.toNm,
    stepNm,
    maxAbsR: maxR,
    meanAbsR: sumR / count,
    maxAbsT: maxT,
    meanAbsT: sumT / count,
    wavelengthsNm: grid,
    design: { R: a.R, T: a.T },
    deposited: { R: b.R, T: b.T },
  };
}
