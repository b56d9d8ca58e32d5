/**
 * The thin-film kernel: Abelès characteristic matrices for a stack at any angle and
 * polarisation, with an optional thick substrate treated incoherently.
 *
 * Conventions (Macleod, *Thin-Film Optical Filters*, ch. 2):
 * - N = n − i·k, k ≥ 0 absorbing, fields ∝ exp(+iωt). Optical admittances in units of the
 *   free-space admittance: η = N cos θ (s) and η = N / cos θ (p), so r_p = r_s at normal
 *   incidence. (A library using N = n + i·k and the other p sign gets r_p = −conj(r) and
 *   r_s = conj(r); R, T and A agree.)
 * - `layers` are in deposition order: layer 0 lies on the substrate; light from the incident
 *   medium meets the last layer first.
 * - All media are evaluated once per wavelength when the model is built; evaluating a stack
 *   then costs one sine, one cosine and (for an absorbing layer) one exponential per layer,
 *   and allocates nothing.
 */
import { indexAt, dispersionRangeNm, type Dispersion, type IndexNK } from './dispersion.ts';

export type Polarisation = 's' | 'p' | 'mean';

/** A stack whose every medium is a dispersion model (material names already resolved). */
export interface StackSpec {
  /** The medium light comes from; it must be lossless. */
  readonly incident: Dispersion;
  /** Deposition order: `layers[0]` lies on the substrate. */
  readonly layers: readonly { readonly dispersion: Dispersion; readonly thicknessNm: number }[];
  readonly substrate: Dispersion;
  /**
   * `semi-infinite`: T is the flux entering the substrate. `incoherent`: the substrate has a
   * finite thickness and a bare back face to `exit`; intensities add inside it.
   */
  readonly back: 'semi-infinite' | 'incoherent';
  /** Required for `incoherent`. */
  readonly substrateThicknessNm?: number;
  /** Medium behind the substrate's back face (for `incoherent`); defaults to the incident medium. */
  readonly exit?: Dispersion;
}

/** Result of one evaluation. Power fractions of the incident flux; R + T + A = 1. */
export interface OpticalResult {
  R: number;
  T: number;
  /** Total absorptance (layers, plus the substrate when it is incoherent). */
  A: number;
  /** Absorptance in the layers alone. */
  aLayers: number;
  /** Amplitude reflection coefficient at the front surface (coherent part), our convention. NaN for `mean`. */
  rRe: number;
  rIm: number;
}

export function createOpticalResult(): OpticalResult {
  return { R: 0, T: 0, A: 0, aLayers: 0, rRe: 0, rIm: 0 };
}

/**
 * Per (wavelength, medium) constants, `STRIDE` doubles each: q = N cos θ (re, im), then for s and
 * for p the admittance η and its inverse 1/η (re, im, re, im).
 */
const Q_RE = 0;
const Q_IM = 1;
const S_ETA_RE = 2;
const P_ETA_RE = 6;
const STRIDE = 10;

export interface OpticalModel {
  readonly wavelengthsNm: Float64Array;
  readonly angleDeg: number;
  /** Number of distinct media (layers' materials, incident, substrate, exit). */
  readonly mediaCount: number;
  /** Medium index of each layer, deposition order. */
  readonly layerMedium: Int32Array;
  /** The design thicknesses, deposition order (callers may pass other thicknesses to evaluate). */
  readonly thicknessNm: Float64Array;
  readonly incidentMedium: number;
  readonly substrateMedium: number;
  readonly exitMedium: number;
  readonly back: 'semi-infinite' | 'incoherent';
  readonly substrateThicknessNm: number;
  /** 2π/λ per wavelength (nm⁻¹). */
  readonly waveNumber: Float64Array;
  /** Packed constants, index `(w * mediaCount + m) * STRIDE`. */
  readonly media: Float64Array;
  /**
   * Per wavelength, for an incoherent substrate: the single-pass flux transmittance τ through
   * it, then R and T of its bare back face for s, then for p (5 doubles a wavelength).
   */
  readonly backFace: Float64Array;
  /** Scratch: the layers' characteristic matrix P = L_top · … · L_1 as re/im pairs P11 P12 P21 P22. */
  readonly matrix: Float64Array;
}

/** Thrown when a stack cannot be modelled as given; the message says why in one sentence. */
export class OpticalModelError extends Error {
  override name = 'OpticalModelError';
}

/**
 * Precomputes everything that depends on wavelength and angle but not on layer thickness.
 * Throws {@link OpticalModelError} for an absorbing incident medium, an angle outside [0°, 90°),
 * or a wavelength outside a tabulated material's range.
 */
export function buildOpticalModel(
  stack: StackSpec,
  wavelengthsNm: ArrayLike<number>,
  angleDeg: number,
): OpticalModel {
  if (!(angleDeg >= 0 && angleDeg < 90)) {
    throw new OpticalModelError(`angle of incidence must be in [0, 90) degrees, got ${angleDeg}`);
  }
  if (wavelengthsNm.length === 0) throw new OpticalModelError('the wavelength grid is empty');
  const dispersions: Dispersion[] = [];
  const mediumOf = (d: Dispersion): number => {
    const found = dispersions.indexOf(d);
    if (found >= 0) return found;
    dispersions.push(d);
    return dispersions.length - 1;
  };
  const incidentMedium = mediumOf(stack.incident);
  const substrateMedium = mediumOf(stack.substrate);
  const exitMedium = mediumOf(stack.exit ?? stack.incident);
  const layerMedium = Int32Array.from(stack.layers, (layer) => mediumOf(layer.dispersion));
  const thicknessNm = Float64Array.from(stack.layers, (layer) => layer.thicknessNm);
  for (const [i, t] of thicknessNm.entries()) {
    if (!(t >= 0 && Number.isFinite(t))) {
      throw new OpticalModelError(`layer ${i + 1} has thickness ${t} nm; it must be finite and ≥ 0`);
    }
  }
  let substrateThicknessNm = 0;
  if (stack.back === 'incoherent') {
    substrateThicknessNm = stack.substrateThicknessNm ?? Number.NaN;
    if (!(substrateThicknessNm > 0 && Number.isFinite(substrateThicknessNm))) {
      throw new OpticalModelError('an incoherent substrate needs a finite positive thickness');
    }
  }

  const nWl = wavelengthsNm.length;
  const mediaCount = dispersions.length;
  const grid = Float64Array.from(wavelengthsNm);
  const waveNumber = new Float64Array(nWl);
  const media = new Float64Array(nWl * mediaCount * STRIDE);
  const theta0 = (angleDeg * Math.PI) / 180;
  const nk: IndexNK = { n: 0, k: 0 };
  for (let w = 0; w < nWl; w++) {
    const lambda = grid[w] as number;
    if (!(lambda > 0 && Number.isFinite(lambda))) {
      throw new OpticalModelError(`wavelength ${lambda} nm is not a positive number`);
    }
    waveNumber[w] = (2 * Math.PI) / lambda;
    indexAt(nk, stack.incident, lambda);
    if (nk.k !== 0) throw new OpticalModelError(`the incident medium absorbs at ${lambda} nm (k = ${nk.k})`);
    // Snell's invariant n₀ sin θ₀ (real, since the incident medium is lossless).
    const s0 = nk.n * Math.sin(theta0);
    for (let m = 0; m < mediaCount; m++) {
      const d = dispersions[m] as Dispersion;
      indexAt(nk, d, lambda);
      if (!(nk.n > 0) || !(nk.k >= 0)) {
        const [lo, hi] = dispersionRangeNm(d);
        throw new OpticalModelError(
          `a material has no valid index at ${lambda} nm (its data cover ${lo}–${hi} nm)`,
        );
      }
      writeMediumConstants(media, (w * mediaCount + m) * STRIDE, nk.n, nk.k, s0);
    }
  }
  return {
    wavelengthsNm: grid,
    angleDeg,
    mediaCount,
    layerMedium,
    thicknessNm,
    incidentMedium,
    substrateMedium,
    exitMedium,
    back: stack.back,
    substrateThicknessNm,
    waveNumber,
    media,
    backFace: backFaceConstants(media, mediaCount, waveNumber, substrateMedium, exitMedium, substrateThicknessNm),
    matrix: new Float64Array(8),
  };
}

function backFaceConstants(
  media: Float64Array,
  mediaCount: number,
  waveNumber: Float64Array,
  substrateMedium: number,
  exitMedium: number,
  substrateThicknessNm: number,
): Float64Array {
  const out = new Float64Array(waveNumber.length * 5);
  for (let w = 0; w < waveNumber.length; w++) {
    const atS = (w * mediaCount + substrateMedium) * STRIDE;
    const atE = (w * mediaCount + exitMedium) * STRIDE;
    // One pass through the substrate attenuates the flux by exp(−4π |Im q| t / λ).
    out[w * 5] = Math.exp(2 * (waveNumber[w] as number) * substrateThicknessNm * (media[atS + Q_IM] as number));
    for (const [slot, eta] of [[1, S_ETA_RE], [3, P_ETA_RE]] as const) {
      // Bare back face, substrate → exit medium: r = (η_s − η_e)/(η_s + η_e), T = 4 Re η_s Re η_e / |η_s + η_e|².
      const esRe = media[atS + eta] as number;
      const esIm = media[atS + eta + 1] as number;
      const eeRe = media[atE + eta] as number;
      const eeIm = media[atE + eta + 1] as number;
      const s2 = (esRe + eeRe) ** 2 + (esIm + eeIm) ** 2;
      out[w * 5 + slot] = ((esRe - eeRe) ** 2 + (esIm - eeIm) ** 2) / s2;
      out[w * 5 + slot + 1] = (4 * esRe * eeRe) / s2;
    }
  }
  return out;
}

/**
 * q = N cos θ = √(N² − s₀²) with the branch of a wave that decays (or, lossless, travels)
 * away from the interface: Im q < 0, or Im q = 0 and Re q > 0 (Born & Wolf, §1.5.4 and §13.2,
 * for the complex angle; sign for exp(+iωt)). Then η_s = q and η_p = N²/q.
 */
function writeMediumConstants(out: Float64Array, at: number, n: number, k: number, s0: number): void {
  // N² = (n − ik)² = n² − k² − 2ink
  const n2Re = n * n - k * k;
  const n2Im = -2 * n * k;
  const aRe = n2Re - s0 * s0;
  const aIm = n2Im;
  // Principal square root without cancellation (the small part from aIm / 2·big part), then
  // choose the decaying branch.
  const mod = Math.hypot(aRe, aIm);
  let qRe: number;
  let qIm: number;
  if (aRe >= 0) {
    qRe = Math.sqrt((mod + aRe) / 2);
    qIm = qRe === 0 ? 0 : aIm / (2 * qRe);
  } else {
    qIm = Math.sqrt((mod - aRe) / 2);
    if (aIm < 0) qIm = -qIm;
    qRe = aIm / (2 * qIm);
  }
  const decayingFirst = Math.abs(qIm) > 1e-14 * Math.hypot(qRe, qIm);
  if (decayingFirst ? qIm > 0 : qRe < 0) {
    qRe = -qRe;
    qIm = -qIm;
  }
  if (qRe === 0 && qIm === 0) {
    // Exactly at a critical angle q vanishes and η_p = N²/q is infinite; step a hair into the
    // evanescent side, where R and T take their (continuous) limits to ~1e-12.
    qIm = -1e-12;
  }
  out[at + Q_RE] = qRe;
  out[at + Q_IM] = qIm;
  writeAdmittance(out, at + S_ETA_RE, qRe, qIm);
  // η_p = N² / q
  const qMod2 = qRe * qRe + qIm * qIm;
  const pRe = (n2Re * qRe + n2Im * qIm) / qMod2;
  const pIm = (n2Im * qRe - n2Re * qIm) / qMod2;
  writeAdmittance(out, at + P_ETA_RE, pRe, pIm);
}

/** Writes η and 1/η at `at` .. `at + 3`. */
function writeAdmittance(out: Float64Array, at: number, re: number, im: number): void {
  const mod2 = re * re + im * im;
  out[at] = re;
  out[at + 1] = im;
  out[at + 2] = re / mod2;
  out[at + 3] = -im / mod2;
}

/**
 * Evaluates the stack at wavelength index `w` for polarisation `pol`, with the layer
 * thicknesses `thicknessNm` (deposition order; defaults to the design's) and writes into `out`.
 */
export function evaluate(
  out: OpticalResult,
  model: OpticalModel,
  w: number,
  pol: Polarisation,
  thicknessNm: ArrayLike<number> = model.thicknessNm,
): OpticalResult {
  if (pol !== 'mean') return evaluatePolarised(out, model, w, pol === 's' ? S_ETA_RE : P_ETA_RE, thicknessNm);
  evaluatePolarised(out, model, w, S_ETA_RE, thicknessNm);
  const R = out.R;
  const T = out.T;
  const A = out.A;
  const aLayers = out.aLayers;
  evaluatePolarised(out, model, w, P_ETA_RE, thicknessNm);
  out.R = (out.R + R) / 2;
  out.T = (out.T + T) / 2;
  out.A = (out.A + A) / 2;
  out.aLayers = (out.aLayers + aLayers) / 2;
  out.rRe = Number.NaN;
  out.rIm = Number.NaN;
  return out;
}

/** Spectra of R, T and A over the model's whole grid, written into the given arrays. */
export function spectrum(
  out: { R: Float64Array; T: Float64Array; A: Float64Array },
  model: OpticalModel,
  pol: Polarisation,
  thicknessNm: ArrayLike<number> = model.thicknessNm,
  scratch: OpticalResult = createOpticalResult(),
): void {
  const nWl = model.wavelengthsNm.length;
  for (let w = 0; w < nWl; w++) {
    evaluate(scratch, model, w, pol, thicknessNm);
    out.R[w] = scratch.R;
    out.T[w] = scratch.T;
    out.A[w] = scratch.A;
  }
}

/**
 * P ← L_j · P for every layer from the substrate outward, with the Abelès layer matrix
 * L = [[cos δ, i sin δ / η], [i η sin δ, cos δ]], δ = 2π q d / λ (Macleod, eq. 2.107; Abelès,
 * Ann. Phys. (Paris) 5, 596 (1950)).
 */
function multiplyLayers(
  dest: Float64Array,
  model: OpticalModel,
  w: number,
  etaOffset: number,
  thicknessNm: ArrayLike<number>,
  from: number,
  to: number,
  start: Float64Array | undefined,
): void {
  const media = model.media;
  const layerMedium = model.layerMedium;
  const base = w * model.mediaCount;
  const k0 = model.waveNumber[w] as number;
  let a11r = 1;
  let a11i = 0;
  let a12r = 0;
  let a12i = 0;
  let a21r = 0;
  let a21i = 0;
  let a22r = 1;
  let a22i = 0;
  if (start !== undefined) {
    a11r = start[0] as number;
    a11i = start[1] as number;
    a12r = start[2] as number;
    a12i = start[3] as number;
    a21r = start[4] as number;
    a21i = start[5] as number;
    a22r = start[6] as number;
    a22i = start[7] as number;
  }
  for (let j = from; j < to; j++) {
    const at = (base + (layerMedium[j] as number)) * STRIDE;
    const phase = k0 * (thicknessNm[j] as number);
    const dRe = phase * (media[at + Q_RE] as number);
    const dIm = phase * (media[at + Q_IM] as number);
    const cr = Math.cos(dRe);
    const sr = Math.sin(dRe);
    let cosRe = cr;
    let cosIm = 0;
    let sinRe = sr;
    let sinIm = 0;
    if (dIm !== 0) {
      // cos(a + ib) = cos a cosh b − i sin a sinh b; sin(a + ib) = sin a cosh b + i cos a sinh b
      let ch: number;
      let sh: number;
      if (Math.abs(dIm) < 1e-3) {
        // Taylor series: (e − 1/e)/2 would lose digits to cancellation for a faint absorption.
        const b2 = dIm * dIm;
        ch = 1 + b2 * (0.5 + b2 / 24);
        sh = dIm * (1 + b2 * (1 / 6 + b2 / 120));
      } else {
        const e = Math.exp(dIm);
        const ei = 1 / e;
        ch = 0.5 * (e + ei);
        sh = 0.5 * (e - ei);
      }
      cosRe = cr * ch;
      cosIm = -sr * sh;
      sinRe = sr * ch;
      sinIm = cr * sh;
    }
    // i·sin δ
    const isRe = -sinIm;
    const isIm = sinRe;
    const etaRe = media[at + etaOffset] as number;
    const etaIm = media[at + etaOffset + 1] as number;
    const invRe = media[at + etaOffset + 2] as number;
    const invIm = media[at + etaOffset + 3] as number;
    // u = i sin δ / η (top right), v = i η sin δ (bottom left)
    const uRe = isRe * invRe - isIm * invIm;
    const uIm = isRe * invIm + isIm * invRe;
    const vRe = isRe * etaRe - isIm * etaIm;
    const vIm = isRe * etaIm + isIm * etaRe;
    // [a11 a12; a21 a22] ← [cos u; v cos] · [a11 a12; a21 a22]
    const n11r = cosRe * a11r - cosIm * a11i + (uRe * a21r - uIm * a21i);
    const n11i = cosRe * a11i + cosIm * a11r + (uRe * a21i + uIm * a21r);
    const n12r = cosRe * a12r - cosIm * a12i + (uRe * a22r - uIm * a22i);
    const n12i = cosRe * a12i + cosIm * a12r + (uRe * a22i + uIm * a22r);
    const n21r = vRe * a11r - vIm * a11i + (cosRe * a21r - cosIm * a21i);
    const n21i = vRe * a11i + vIm * a11r + (cosRe * a21i + cosIm * a21r);
    const n22r = vRe * a12r - vIm * a12i + (cosRe * a22r - cosIm * a22i);
    const n22i = vRe * a12i + vIm * a12r + (cosRe * a22i + cosIm * a22r);
    a11r = n11r;
    a11i = n11i;
    a12r = n12r;
    a12i = n12i;
    a21r = n21r;
    a21i = n21i;
    a22r = n22r;
    a22i = n22i;
  }
  const p = dest;
  p[0] = a11r;
  p[1] = a11i;
  p[2] = a12r;
  p[3] = a12i;
  p[4] = a21r;
  p[5] = a21i;
  p[6] = a22r;
  p[7] = a22i;
}

function evaluatePolarised(
  out: OpticalResult,
  model: OpticalModel,
  w: number,
  etaOffset: number,
  thicknessNm: ArrayLike<number>,
): OpticalResult {
  multiplyLayers(model.matrix, model, w, etaOffset, thicknessNm, 0, model.layerMedium.length, undefined);
  return resultFromPacked(out, model, w, etaOffset, model.matrix);
}

/**
 * The characteristic matrix of layers `from` … `to − 1` (deposition order) applied on top of
 * `start` (default: the identity), i.e. L_(to−1) · … · L_from · start, written into `dest` as
 * re/im pairs of P11 P12 P21 P22. With `start` the matrix of the layers below, this evaluates
 * a growing top layer for the cost of one layer.
 */
export function layersMatrix(
  dest: Float64Array,
  model: OpticalModel,
  w: number,
  pol: 's' | 'p',
  thicknessNm: ArrayLike<number>,
  from: number,
  to: number,
  start?: Float64Array,
): Float64Array {
  multiplyLayers(dest, model, w, pol === 's' ? S_ETA_RE : P_ETA_RE, thicknessNm, from, to, start);
  return dest;
}

/** R, T and A of the model's media around a characteristic matrix from {@link layersMatrix}. */
export function resultFromMatrix(
  out: OpticalResult,
  model: OpticalModel,
  w: number,
  pol: 's' | 'p',
  matrix: Float64Array,
): OpticalResult {
  return resultFromPacked(out, model, w, pol === 's' ? S_ETA_RE : P_ETA_RE, matrix);
}

function resultFromPacked(
  out: OpticalResult,
  model: OpticalModel,
  w: number,
  etaOffset: number,
  p: Float64Array,
): OpticalResult {
  const media = model.media;
  const base = w * model.mediaCount;
  const at0 = (base + model.incidentMedium) * STRIDE + etaOffset;
  const atS = (base + model.substrateMedium) * STRIDE + etaOffset;
  const eta0 = media[at0] as number; // real: the incident medium is lossless
  const esRe = media[atS] as number;
  const esIm = media[atS + 1] as number;
  const m11Re = p[0] as number;
  const m11Im = p[1] as number;
  const m12Re = p[2] as number;
  const m12Im = p[3] as number;
  const m21Re = p[4] as number;
  const m21Im = p[5] as number;
  const m22Re = p[6] as number;
  const m22Im = p[7] as number;

  // Seen from the incident medium: [B; C] = P · [1; η_s] (Macleod, eq. 2.110).
  const bRe = m11Re + (m12Re * esRe - m12Im * esIm);
  const bIm = m11Im + (m12Re * esIm + m12Im * esRe);
  const cRe = m21Re + (m22Re * esRe - m22Im * esIm);
  const cIm = m21Im + (m22Re * esIm + m22Im * esRe);
  const denRe = eta0 * bRe + cRe;
  const denIm = eta0 * bIm + cIm;
  const den2 = denRe * denRe + denIm * denIm;
  const numRe = eta0 * bRe - cRe;
  const numIm = eta0 * bIm - cIm;
  // r = (η₀B − C)/(η₀B + C); T = 4η₀ Re η_s / |η₀B + C|²; A = 4η₀ Re(BC* − η_s) / |η₀B + C|²
  // (Macleod, eqs. 2.112–2.114)
  const rRe = (numRe * denRe + numIm * denIm) / den2;
  const rIm = (numIm * denRe - numRe * denIm) / den2;
  const Rf = rRe * rRe + rIm * rIm;
  const Tf = (4 * eta0 * esRe) / den2;
  const Af = (4 * eta0 * (bRe * cRe + bIm * cIm - esRe)) / den2;
  out.rRe = rRe;
  out.rIm = rIm;
  if (model.back === 'semi-infinite') {
    out.R = Rf;
    out.T = Tf;
    out.A = Af;
    out.aLayers = Af;
    return out;
  }

  // Seen from inside the substrate the layers come in reverse order, whose product is P with
  // its diagonal swapped (each layer matrix has equal diagonal elements): [B'; C'] =
  // [[P22, P12], [P21, P11]] · [1; η₀].
  const b2Re = m22Re + m12Re * eta0;
  const b2Im = m22Im + m12Im * eta0;
  const c2Re = m21Re + m11Re * eta0;
  const c2Im = m21Im + m11Im * eta0;
  const d2Re = esRe * b2Re - esIm * b2Im + c2Re;
  const d2Im = esRe * b2Im + esIm * b2Re + c2Im;
  const n2Re = esRe * b2Re - esIm * b2Im - c2Re;
  const n2Im = esRe * b2Im + esIm * b2Re - c2Im;
  const dd2 = d2Re * d2Re + d2Im * d2Im;
  const Rb = (n2Re * n2Re + n2Im * n2Im) / dd2; // coating, from the substrate side
  const Tb = (4 * esRe * eta0) / dd2;
  const Ab = 1 - Rb - Tb;

  const face = w * 5 + (etaOffset === S_ETA_RE ? 1 : 3);
  const tau = model.backFace[w * 5] as number;
  const Rback = model.backFace[face] as number;
  const Tback = model.backFace[face + 1] as number;
  // Incoherent sum of the multiple passes (e.g. Macleod §2.9; Heavens, Optical Properties of
  // Thin Solid Films, ch. 4; from memory).
  const loop = 1 / (1 - Rb * Rback * tau * tau);
  const toBack = Tf * tau * tau * Rback * loop; // flux returning onto the coating from inside
  out.R = Rf + Tb * toBack;
  out.T = Tf * tau * Tback * loop;
  out.A = 1 - out.R - out.T;
  out.aLayers = Af + Ab * toBack;
  return out;
}
