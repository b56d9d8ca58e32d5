/**
 * A broadband monitor's view of a witness chip: the whole spectrum (T or R) of the chip with its
 * finished layers and a growing top layer, as a function of two numbers of the growing layer —
 * u, its thickness at the design index with its optical thickness (physical d = u/κ), and κ, a
 * scale on the material's dispersive n (n_true(λ) = κ·n(λ), k unchanged).
 *
 * The finished layers are fixed for the whole layer: their characteristic matrix per wavelength
 * (and polarisation) is computed once when the chip is built, so a spectrum costs one layer
 * matrix and the kernel's closing formulas per wavelength, and allocates nothing. The growing
 * layer's admittance depends on κ, so it is formed here from n, k and Snell's invariant rather than
 * read from the kernel's media table; everything outside the layers (incident medium, substrate,
 * its back face) is the kernel's (`resultFromMatrix`).
 */
import { indexAt, type Dispersion, type IndexNK } from '../optics/dispersion.ts';
import {
  buildOpticalModel,
  createOpticalResult,
  layersMatrix,
  resultFromMatrix,
  type OpticalModel,
  type OpticalResult,
} from '../optics/optical-model.ts';

export interface BroadbandChipSpec {
  readonly incident: Dispersion;
  readonly substrate: Dispersion;
  /** `incoherent`: a chip with a bare back face; `none`: semi-infinite. */
  readonly back: 'incoherent' | 'none';
  readonly substrateThicknessNm: number;
  /** The finished layers on the chip as the refits know them, deposition order (chip nm, their fitted index in the dispersion). */
  readonly below: readonly { readonly dispersion: Dispersion; readonly thicknessNm: number }[];
  /** The growing layer's material at its design index. */
  readonly growing: Dispersion;
  readonly angleDeg: number;
  readonly signal: 'transmission' | 'reflection';
  /** The light's polarisation off normal incidence: `mean` (unpolarised, the default), or `s` or `p` behind a polariser. */
  readonly polarisation?: 's' | 'p' | 'mean';
  /**
   * Wavelengths where every medium's data are valid, nm (default: the whole grid). Grid points
   * outside it have no model: the spectrum there is NaN and they must stay out of a fit's window.
   */
  readonly validRangeNm?: readonly [number, number];
}

export interface BroadbandChip {
  readonly spec: BroadbandChipSpec;
  /** The instrument's grid, nm. */
  readonly wavelengthsNm: Float64Array;
  /** Grid indices inside the valid range, ascending. */
  readonly modelled: Int32Array;
  /**
   * Writes the signal at every grid index in `use` (every modelled one when absent, NaN elsewhere) into
   * `out[i]` for i the grid index: growing layer at design-index thickness `uNm`, index factor `kappa`.
   */
  spectrum(out: Float64Array, uNm: number, kappa: number, use?: Int32Array): void;
  /** The same, with ∂/∂u and ∂/∂κ (forward differences, steps far below any fit's precision). */
  spectrumAndSlopes(out: Float64Array, dU: Float64Array, dKappa: Float64Array, uNm: number, kappa: number, use?: Int32Array): void;
}

/** Forward-difference steps: truncation ~h·S″ ≈ 1e-6 of the slope, rounding ~1e-16/h far below. */
const STEP_U_NM = 1e-5;
const STEP_KAPPA = 1e-7;

export function buildBroadbandChip(spec: BroadbandChipSpec, wavelengthsNm: ArrayLike<number>): BroadbandChip {
  const grid = Float64Array.from(wavelengthsNm);
  const [lo, hi] = spec.validRangeNm ?? [0, Number.POSITIVE_INFINITY];
  const modelled = Int32Array.from(Array.from(grid.keys()).filter((w) => (grid[w] as number) >= lo && (grid[w] as number) <= hi));
  if (modelled.length === 0) throw new RangeError(`no wavelength of the grid lies in the valid range ${lo}–${hi} nm`);
  // The kernel is built on the modelled points only (a table's data may not reach the rest); m(w) maps a grid index to it.
  const modelOf = new Int32Array(grid.length).fill(-1);
  for (let i = 0; i < modelled.length; i++) modelOf[modelled[i] as number] = i;
  const layers = [...spec.below, { dispersion: spec.growing, thicknessNm: 0 }];
  const model: OpticalModel = buildOpticalModel(
    {
      incident: spec.incident,
      layers,
      substrate: spec.substrate,
      back: spec.back === 'incoherent' ? 'incoherent' : 'semi-infinite',
      ...(spec.back === 'incoherent' ? { substrateThicknessNm: spec.substrateThicknessNm } : {}),
    },
    Array.from(modelled, (w) => grid[w] as number),
    spec.angleDeg,
  );
  const nW = modelled.length;
  const top = layers.length - 1;
  // At normal incidence s and p coincide.
  const polarisation = spec.angleDeg === 0 ? 's' : (spec.polarisation ?? 'mean');
  const pols: readonly ('s' | 'p')[] = polarisation === 'mean' ? ['s', 'p'] : [polarisation];
  const nP = pols.length;
  const below = new Float64Array(nW * nP * 8);
  const view = new Float64Array(8);
  const thickness = Float64Array.from(model.thicknessNm);
  // Per wavelength: the growing material's n and k, k₀ = 2π/λ, and s₀² (Snell's invariant squared).
  const material = new Float64Array(nW * 4);
  const nk: IndexNK = { n: 0, k: 0 };
  const s0 = Math.sin((spec.angleDeg * Math.PI) / 180);
  for (let w = 0; w < nW; w++) {
    const lambda = model.wavelengthsNm[w] as number;
    for (let p = 0; p < nP; p++) {
      layersMatrix(view, model, w, pols[p] as 's' | 'p', thickness, 0, top);
      below.set(view, (w * nP + p) * 8);
    }
    indexAt(nk, spec.growing, lambda);
    const n0 = indexAt({ n: 0, k: 0 }, spec.incident, lambda).n;
    material[w * 4] = nk.n;
    material[w * 4 + 1] = nk.k;
    material[w * 4 + 2] = model.waveNumber[w] as number;
    material[w * 4 + 3] = (n0 * s0) ** 2;
  }
  const matrix = new Float64Array(8);
  const result: OpticalResult = createOpticalResult();
  const transmission = spec.signal === 'transmission';
  const polWeight = 1 / nP;

  /** The signal at model index w, growing layer of physical thickness d and index factor κ. */
  function signalAt(w: number, dNm: number, kappa: number): number {
    const n = (material[w * 4] as number) * kappa;
    const k = material[w * 4 + 1] as number;
    const k0 = material[w * 4 + 2] as number;
    const s02 = material[w * 4 + 3] as number;
    // N² = (n − ik)², q = √(N² − s₀²) on the decaying branch (Im q ≤ 0; Born & Wolf §1.5.4), η_s = q, η_p = N²/q.
    const n2Re = n * n - k * k;
    const n2Im = -2 * n * k;
    const aRe = n2Re - s02;
    const mod = Math.hypot(aRe, n2Im);
    let qRe: number;
    let qIm: number;
    if (aRe >= 0) {
      qRe = Math.sqrt((mod + aRe) / 2);
      qIm = qRe === 0 ? 0 : n2Im / (2 * qRe);
    } else {
      qIm = -Math.sqrt((mod - aRe) / 2);
      qRe = n2Im / (2 * qIm);
    }
    // δ = k₀ q d; cos δ and sin δ of a complex argument.
    const dRe = k0 * qRe * dNm;
    const dIm = k0 * qIm * dNm;
    const cr = Math.cos(dRe);
    const sr = Math.sin(dRe);
    let ch = 1;
    let sh = 0;
    if (dIm !== 0 && Math.abs(dIm) < 1e-3) {
      // Taylor series, as the kernel: (e − 1/e)/2 would lose digits to cancellation for a faint absorption.
      const b2 = dIm * dIm;
      ch = 1 + b2 * (0.5 + b2 / 24);
      sh = dIm * (1 + b2 * (1 / 6 + b2 / 120));
    } else if (dIm !== 0) {
      const e = Math.exp(dIm);
      ch = 0.5 * (e + 1 / e);
      sh = 0.5 * (e - 1 / e);
    }
    const cosRe = cr * ch;
    const cosIm = -sr * sh;
    // i·sin δ = i(sin a cosh b + i cos a sinh b)
    const isRe = -cr * sh;
    const isIm = sr * ch;
    let sum = 0;
    for (let p = 0; p < nP; p++) {
      let etaRe = qRe;
      let etaIm = qIm;
      if (pols[p] === 'p') {
        const q2 = qRe * qRe + qIm * qIm;
        etaRe = (n2Re * qRe + n2Im * qIm) / q2;
        etaIm = (n2Im * qRe - n2Re * qIm) / q2;
      }
      const e2 = etaRe * etaRe + etaIm * etaIm;
      const invRe = etaRe / e2;
      const invIm = -etaIm / e2;
      // The Abelès layer matrix [[cos δ, i sin δ/η], [i η sin δ, cos δ]] (Macleod, eq. 2.107) on the layers below.
      const uRe = isRe * invRe - isIm * invIm;
      const uIm = isRe * invIm + isIm * invRe;
      const vRe = isRe * etaRe - isIm * etaIm;
      const vIm = isRe * etaIm + isIm * etaRe;
      const at = (w * nP + p) * 8;
      const a11r = below[at] as number;
      const a11i = below[at + 1] as number;
      const a12r = below[at + 2] as number;
      const a12i = below[at + 3] as number;
      const a21r = below[at + 4] as number;
      const a21i = below[at + 5] as number;
      const a22r = below[at + 6] as number;
      const a22i = below[at + 7] as number;
      matrix[0] = cosRe * a11r - cosIm * a11i + (uRe * a21r - uIm * a21i);
      matrix[1] = cosRe * a11i + cosIm * a11r + (uRe * a21i + uIm * a21r);
      matrix[2] = cosRe * a12r - cosIm * a12i + (uRe * a22r - uIm * a22i);
      matrix[3] = cosRe * a12i + cosIm * a12r + (uRe * a22i + uIm * a22r);
      matrix[4] = vRe * a11r - vIm * a11i + (cosRe * a21r - cosIm * a21i);
      matrix[5] = vRe * a11i + vIm * a11r + (cosRe * a21i + cosIm * a21r);
      matrix[6] = vRe * a12r - vIm * a12i + (cosRe * a22r - cosIm * a22i);
      matrix[7] = vRe * a12i + vIm * a12r + (cosRe * a22i + cosIm * a22r);
      resultFromMatrix(result, model, w, pols[p] as 's' | 'p', matrix);
      sum += transmission ? result.T : result.R;
    }
    return sum * polWeight;
  }

  return {
    spec,
    wavelengthsNm: grid,
    modelled,
    spectrum(out, uNm, kappa, use) {
      const d = uNm / kappa;
      const indices = use ?? modelled;
      if (!use) out.fill(Number.NaN);
      for (let i = 0; i < indices.length; i++) {
        const w = indices[i] as number;
        const m = modelOf[w] as number;
        out[w] = m < 0 ? Number.NaN : signalAt(m, d, kappa);
      }
    },
    spectrumAndSlopes(out, dU, dKappa, uNm, kappa, use) {
      const d = uNm / kappa;
      const dUp = (uNm + STEP_U_NM) / kappa;
      const kUp = kappa + STEP_KAPPA;
      const dAtK = uNm / kUp;
      const indices = use ?? modelled;
      for (let i = 0; i < indices.length; i++) {
        const w = indices[i] as number;
        const m = modelOf[w] as number;
        if (m < 0) {
          out[w] = dU[w] = dKappa[w] = Number.NaN;
          continue;
        }
        const s = signalAt(m, d, kappa);
        out[w] = s;
        dU[w] = (signalAt(m, dUp, kappa) - s) / STEP_U_NM;
        dKappa[w] = (signalAt(m, dAtK, kUp) - s) / STEP_KAPPA;
      }
    },
  };
}
