/**
 * Quartz crystal monitor math: Sauerbrey mass sensitivity, Lu–Lewis Z-match thickness and its
 * inverse, an exact acoustic model of a crystal carrying several layers, tooling factor and
 * crystal life.
 *
 * Conventions that hold for every function here:
 * - f_q (`fBareHz`) is the reference frequency of the crystal with no film of interest on it;
 *   f_c (`fLoadedHz`, `fNowHz`) the frequency read now. Both are the fundamental thickness-shear
 *   resonance, in Hz.
 * - Z-ratio `zRatio` = Z_q / Z_f = √(ρ_q μ_q / (ρ_f μ_f)), quartz over film, the direction of
 *   Lu & Lewis (1972). Some papers use the inverse (Benes, J. Appl. Phys. 56, 608 (1984)).
 * - Thicknesses are physical film thickness on the crystal, in nm; densities in g/cm³.
 * - Bad input returns NaN, never throws (these functions run in the reading loop): any
 *   non-finite argument, a frequency, density or Z-ratio ≤ 0, a negative thickness, and a
 *   loaded frequency above the bare one (no film of non-negative thickness raises the
 *   frequency; a caller that sees a reading above its reference, e.g. from a thermal transient
 *   at a layer start, decides itself whether to clamp it).
 * - Several materials on one crystal are handled by the exact acoustic (transmission-line)
 *   model of the whole stack ({@link stackFrequencyHz}, {@link stackThicknessNm}), not by the
 *   usual approximation that folds earlier layers into a new "bare" reference frequency.
 */
import {
  QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S,
  QUARTZ_DENSITY_G_PER_CM3,
  QUARTZ_FREQUENCY_CONSTANT_HZ_CM,
} from './quartz.ts';

const CM_PER_NM = 1e-7;
const G_PER_UG = 1e-6;
const PI = Math.PI;
const Z_Q = QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S;
/** Newton iterations are capped; the bracketed solve converges in well under this. */
const MAX_ITERATIONS = 100;

function positive(x: number): boolean {
  return Number.isFinite(x) && x > 0;
}

function nonNegative(x: number): boolean {
  return Number.isFinite(x) && x >= 0;
}

// ---------------------------------------------------------------------------------------------
// Sauerbrey

/**
 * Sauerbrey mass sensitivity C_f = 2 f0² / √(ρ_q μ_q), in Hz·cm²/g: a thin rigid film of areal
 * mass Δm/A lowers the frequency by C_f·Δm/A. 56.60 Hz cm²/µg at 5 MHz, 81.50 at 6 MHz.
 * NaN unless `f0Hz` is finite and > 0.
 */
export function sauerbreySensitivity(f0Hz: number): number {
  if (!positive(f0Hz)) return Number.NaN;
  // Δf = −(2 f0² / √(ρ_q μ_q)) Δm/A (G. Sauerbrey, Z. Phys. 155, 206 (1959))
  return (2 * f0Hz * f0Hz) / Z_Q;
}

/** {@link sauerbreySensitivity} in Hz·cm²/µg, the unit usually quoted. */
export function sauerbreySensitivityHzCm2PerUg(f0Hz: number): number {
  return sauerbreySensitivity(f0Hz) * G_PER_UG;
}

/**
 * Film thickness from the frequency shift by the linear Sauerbrey relation,
 * t_f = (f_q − f_c) / (C_f(f_q) ρ_f). Good for small loads (a few % of the frequency); it
 * underestimates heavier films, which is what the Z-match corrects. See the module notes for NaN.
 */
export function sauerbreyThicknessNm(fBareHz: number, fLoadedHz: number, densityGPerCm3: number): number {
  if (!positive(fBareHz) || !positive(fLoadedHz) || fLoadedHz > fBareHz || !positive(densityGPerCm3)) {
    return Number.NaN;
  }
  // Δm/A = Δf / C_f, t = (Δm/A)/ρ_f (Sauerbrey 1959)
  const arealMassGPerCm2 = (fBareHz - fLoadedHz) / sauerbreySensitivity(fBareHz);
  return arealMassGPerCm2 / densityGPerCm3 / CM_PER_NM;
}

// ---------------------------------------------------------------------------------------------
// Lu–Lewis Z-match, one film

/**
 * Film thickness by the Lu–Lewis Z-match,
 * t_f = (N_q ρ_q / (π ρ_f f_c Z)) · arctan(Z · tan(π (f_q − f_c) / f_q)), Z = Z_q/Z_f.
 *
 * The arctan is taken on its continuous branch, atan2(Z sin x, cos x) with x = π(f_q − f_c)/f_q
 * in [0, π): for loads heavy enough that x passes π/2 (f_c < f_q/2) the principal arctan would
 * jump by π and the thickness would fall; this branch keeps it rising. With Z = 1 the result is
 * exactly (N_q ρ_q / ρ_f)(1/f_c − 1/f_q). See the module notes for NaN.
 */
export function zMatchThicknessNm(
  fBareHz: number,
  fLoadedHz: number,
  densityGPerCm3: number,
  zRatio: number,
): number {
  if (
    !positive(fBareHz) ||
    !positive(fLoadedHz) ||
    fLoadedHz > fBareHz ||
    !positive(densityGPerCm3) ||
    !positive(zRatio)
  ) {
    return Number.NaN;
  }
  // f_q − f_c is exact in Float64 for f_c ≥ f_q/2 (Sterbenz), so thin films keep their digits
  const x = (PI * (fBareHz - fLoadedHz)) / fBareHz;
  // continuous branch of arctan(Z tan x) on x ∈ [0, π)
  const filmPhase = Math.atan2(zRatio * Math.sin(x), Math.cos(x));
  // t_f = (N_q ρ_q / (π ρ_f f_c Z)) arctan(Z tan x) (C. Lu and O. Lewis, J. Appl. Phys. 43, 4385 (1972))
  const thicknessCm =
    ((QUARTZ_FREQUENCY_CONSTANT_HZ_CM * QUARTZ_DENSITY_G_PER_CM3) / (PI * densityGPerCm3 * fLoadedHz * zRatio)) *
    filmPhase;
  return thicknessCm / CM_PER_NM;
}

/**
 * The inverse of {@link zMatchThicknessNm}: the loaded frequency of a crystal of bare frequency
 * `fBareHz` carrying a film `thicknessNm` thick. The film thickness rises strictly as f_c falls
 * over (0, f_q], so the root is unique; it is found by Newton's method kept inside a bracket
 * (bisection whenever a step would leave it or fails to halve), to within a few ulps of f_c. Thickness 0 gives
 * `fBareHz`. See the module notes for NaN.
 */
export function zMatchFrequencyHz(
  fBareHz: number,
  thicknessNm: number,
  densityGPerCm3: number,
  zRatio: number,
): number {
  if (!positive(fBareHz) || !nonNegative(thicknessNm) || !positive(densityGPerCm3) || !positive(zRatio)) {
    return Number.NaN;
  }
  if (thicknessNm === 0) return fBareHz;
  const thicknessCm = thicknessNm * CM_PER_NM;
  // Lu–Lewis rearranged as a phase balance (Lu & Lewis 1972): the film's acoustic phase
  // k_f t_f = 2π f t_f ρ_f Z / Z_q must equal atan2(Z sin x, cos x), x = π(f_q − f)/f_q.
  // F(f) = atan2(Z sin x, cos x) − a f is smooth and strictly falling: F(0) = π, F(f_q) < 0.
  const a = (2 * PI * thicknessCm * densityGPerCm3 * zRatio) / Z_Q;
  const dxdf = -PI / fBareHz;
  let lo = 0;
  let hi = fBareHz;
  let lastStep = fBareHz;
  // start from the exact Z = 1 answer: 1/f = 1/f_q + 2 ρ_f t_f / Z_q (Lu & Lewis 1972, Z = 1)
  let f = 1 / (1 / fBareHz + (2 * densityGPerCm3 * thicknessCm) / Z_Q);
  for (let i = 0; i < MAX_ITERATIONS; i++) {
    const x = (PI * (fBareHz - f)) / fBareHz;
    const s = Math.sin(x);
    const c = Math.cos(x);
    const value = Math.atan2(zRatio * s, c) - a * f;
    if (value === 0) return f;
    if (value > 0) lo = f;
    else hi = f;
    // d/dx atan2(Z sin x, cos x) = Z / (cos² x + Z² sin² x)
    const slope = (zRatio / (c * c + zRatio * zRatio * s * s)) * dxdf - a;
    const step = value / slope;
    // a Newton correction of an ulp or two means f is the root to the precision of Float64
    if (Math.abs(step) <= 2 * Number.EPSILON * f) return f - step;
    let next = f - step;
    // bisect when Newton leaves the bracket or stops halving its step (Press et al.,
    // Numerical Recipes, "rtsafe"; from memory): steep arctan flanks at small Z can make it cycle
    if (!(next > lo && next < hi) || Math.abs(step) > 0.5 * Math.abs(lastStep)) next = 0.5 * (lo + hi);
    if (hi - lo <= 4 * Number.EPSILON * hi) return next;
    lastStep = next - f;
    f = next;
  }
  return f;
}

// ---------------------------------------------------------------------------------------------
// Several layers: exact acoustic transmission-line model

/** One deposited layer on the crystal, as the acoustic model needs it. */
export interface CrystalLayer {
  /** Physical thickness on the crystal, nm (≥ 0). */
  readonly thicknessNm: number;
  /** Film density, g/cm³ (> 0). */
  readonly densityGPerCm3: number;
  /** Z-ratio Z_q/Z_f of the film (> 0), Lu–Lewis direction. */
  readonly zRatio: number;
}

/** The acoustic properties of the layer being deposited, whose thickness is sought. */
export interface CrystalFilm {
  /** Film density, g/cm³ (> 0). */
  readonly densityGPerCm3: number;
  /** Z-ratio Z_q/Z_f of the film (> 0), Lu–Lewis direction. */
  readonly zRatio: number;
}

function layersValid(layers: readonly CrystalLayer[]): boolean {
  for (const layer of layers) {
    if (!nonNegative(layer.thicknessNm) || !positive(layer.densityGPerCm3) || !positive(layer.zRatio)) {
      return false;
    }
  }
  return true;
}

/**
 * The resonance frequency of a crystal of bare frequency `fBareHz` carrying `layers`, by the
 * exact one-dimensional acoustic model (the multilayer generalisation of Lu–Lewis, of which it
 * is the one-layer case).
 *
 * `layers[0]` lies on the quartz (deposited first), the last layer faces the vacuum. The model:
 * a quartz plate and each layer are lossless, uniform, elastic media for a plane shear wave,
 * with impedance Z_i = Z_q/zRatio_i and velocity v_i = Z_i/ρ_i, bonded rigidly, with both outer
 * faces free. The resonance is Z_q tan(π f/f_q) + X_load(f) = 0, where X_load (load impedance
 * i·X_load) comes from the stack by transmission-line recursion from the free surface
 * (X = 0) inwards, X_in = Z_i (X + Z_i tan φ_i)/(Z_i − X tan φ_i), φ_i = 2π f t_i/v_i.
 *
 * That equation has poles wherever a tan does, so it is solved in phase form instead (a Prüfer
 * angle): from the free surface, θ starts at 0, grows by φ_i across each layer and, at each
 * interface, keeps its quadrant while tan θ is scaled by Z_outer/Z_inner. θ rises strictly with f,
 * and the fundamental mode is where θ through layers and quartz first reaches π (θ = nπ at the
 * n-th free–free mode). The root is found by Newton's method kept inside a bracket.
 *
 * Returns `fBareHz` for no layers or zero total thickness; NaN for bad input (module notes).
 */
export function stackFrequencyHz(fBareHz: number, layers: readonly CrystalLayer[]): number {
  if (!positive(fBareHz) || !layersValid(layers)) return Number.NaN;
  // first guess: all layers matched (Z = 1), where 1/f − 1/f_q = Σ 2 ρ_i t_i / Z_q exactly
  let arealMassGPerCm2 = 0;
  for (const layer of layers) arealMassGPerCm2 += layer.densityGPerCm3 * layer.thicknessNm * CM_PER_NM;
  if (arealMassGPerCm2 === 0) return fBareHz;
  let f = 1 / (1 / fBareHz + (2 * arealMassGPerCm2) / Z_Q);
  let lo = 0;
  let hi = fBareHz;
  let lastStep = fBareHz;
  for (let iter = 0; iter < MAX_ITERATIONS; iter++) {
    // G(f) = θ_layers(f) − π(f_q − f)/f_q, strictly rising, G(0) = −π, G(f_q) > 0
    let theta = 0;
    let dThetaDf = 0;
    for (let i = layers.length - 1; i >= 0; i--) {
      const layer = layers[i] as CrystalLayer;
      // φ_i = k_i t_i = 2π f t_i ρ_i zRatio_i / Z_q (plane shear wave, v_i = Z_i/ρ_i)
      const phasePerHz = (2 * PI * layer.thicknessNm * CM_PER_NM * layer.densityGPerCm3 * layer.zRatio) / Z_Q;
      theta += phasePerHz * f;
      dThetaDf += phasePerHz;
      // interface to the medium beneath: tan θ' = (Z_i/Z_inner) tan θ on the same branch
      // (stress and velocity continuous; acoustic transmission-line impedance translation)
      const inner = i > 0 ? (layers[i - 1] as CrystalLayer).zRatio : 1;
      const r = inner / layer.zRatio;
      const turns = Math.floor(theta / PI);
      const alpha = theta - turns * PI;
      const s = Math.sin(alpha);
      const c = Math.cos(alpha);
      theta = turns * PI + Math.atan2(r * s, c);
      dThetaDf *= r / (c * c + r * r * s * s);
    }
    const value = theta - (PI * (fBareHz - f)) / fBareHz;
    if (value === 0) return f;
    if (value < 0) lo = f;
    else hi = f;
    const slope = dThetaDf + PI / fBareHz;
    const step = value / slope;
    // a Newton correction of an ulp or two means f is the root to the precision of Float64
    if (Math.abs(step) <= 2 * Number.EPSILON * f) return f - step;
    let next = f - step;
    // bisect when Newton leaves the bracket or stops halving its step (Press et al.,
    // Numerical Recipes, "rtsafe"; from memory): steep arctan flanks at small Z can make it cycle
    if (!(next > lo && next < hi) || Math.abs(step) > 0.5 * Math.abs(lastStep)) next = 0.5 * (lo + hi);
    if (hi - lo <= 4 * Number.EPSILON * hi) return next;
    lastStep = next - f;
    f = next;
  }
  return f;
}

/**
 * Thickness of the top layer (the one being deposited, with acoustic properties `film`) on a
 * crystal of bare frequency `fBareHz` already carrying `layersBelow` (`layersBelow[0]` on the
 * quartz), given the frequency read now. The exact inverse of {@link stackFrequencyHz}, in
 * closed form: the phase the resonance needs is walked back from the quartz outwards through the
 * known layers, and what is left is the top layer's phase k_f t_f. With no layers below it is
 * exactly the Lu–Lewis Z-match ({@link zMatchThicknessNm}).
 *
 * NaN for bad input (module notes), and when `fNowHz` lies above the frequency of the crystal
 * with `layersBelow` alone (the top layer would need a negative thickness).
 */
export function stackThicknessNm(
  fBareHz: number,
  fNowHz: number,
  layersBelow: readonly CrystalLayer[],
  film: CrystalFilm,
): number {
  if (
    !positive(fBareHz) ||
    !positive(fNowHz) ||
    fNowHz > fBareHz ||
    !positive(film.densityGPerCm3) ||
    !positive(film.zRatio) ||
    !layersValid(layersBelow)
  ) {
    return Number.NaN;
  }
  // phase owed by the layers, seen from the quartz: π − π f/f_q (resonance θ = π, see above)
  let theta = (PI * (fBareHz - fNowHz)) / fBareHz;
  let innerZRatio = 1;
  for (let i = 0; i <= layersBelow.length; i++) {
    const layer = layersBelow[i];
    const zRatio = layer === undefined ? film.zRatio : layer.zRatio;
    // undo the interface: tan θ_outer = (Z_inner/Z_outer) tan θ_inner, same branch
    const r = zRatio / innerZRatio;
    const turns = Math.floor(theta / PI);
    const alpha = theta - turns * PI;
    theta = turns * PI + Math.atan2(r * Math.sin(alpha), Math.cos(alpha));
    innerZRatio = zRatio;
    if (layer === undefined) break;
    // remove this known layer's own phase φ_i = 2π f t_i ρ_i zRatio_i / Z_q
    theta -= (2 * PI * fNowHz * layer.thicknessNm * CM_PER_NM * layer.densityGPerCm3 * layer.zRatio) / Z_Q;
    if (theta < 0) return Number.NaN;
  }
  // t_f = θ / k_f, k_f = 2π f ρ_f Z / Z_q (Lu & Lewis 1972 for one layer)
  const thicknessCm = (theta * Z_Q) / (2 * PI * fNowHz * film.densityGPerCm3 * film.zRatio);
  return thicknessCm / CM_PER_NM;
}

// ---------------------------------------------------------------------------------------------
// Tooling factor

/**
 * Tooling factor = part thickness / crystal thickness, as a fraction (1.0 = 100 %; 0.628 =
 * 62.8 %). Definition (physics-notes). NaN unless `partThicknessNm` ≥ 0 and
 * `crystalThicknessNm` > 0, both finite.
 */
export function toolingFactor(partThicknessNm: number, crystalThicknessNm: number): number {
  if (!nonNegative(partThicknessNm) || !positive(crystalThicknessNm)) return Number.NaN;
  return partThicknessNm / crystalThicknessNm;
}

/**
 * Thickness the crystal must see for `partNm` on the part: part / tooling factor (a fraction,
 * 1.0 = 100 %). Any finite thickness scales; NaN unless the factor is finite and > 0.
 */
export function crystalThicknessFromPartNm(partNm: number, toolingFactorFraction: number): number {
  if (!Number.isFinite(partNm) || !positive(toolingFactorFraction)) return Number.NaN;
  return partNm / toolingFactorFraction;
}

/**
 * Thickness on the part for `crystalNm` on the crystal: crystal × tooling factor (a fraction,
 * 1.0 = 100 %). Any finite thickness scales; NaN unless the factor is finite and > 0.
 */
export function partThicknessFromCrystalNm(crystalNm: number, toolingFactorFraction: number): number {
  if (!Number.isFinite(crystalNm) || !positive(toolingFactorFraction)) return Number.NaN;
  return crystalNm * toolingFactorFraction;
}

/**
 * New tooling factor after a calibration run: TF_new = TF_old · t_measured / t_indicated, where
 * t_indicated is the part thickness the monitor reported with TF_old and t_measured what was
 * measured on the part (definition, physics-notes: 100 % · 157/250 = 62.8 %). Factors are
 * fractions (1.0 = 100 %). NaN unless all three are finite and > 0.
 */
export function recalibrateTooling(oldFactor: number, measuredPartNm: number, indicatedNm: number): number {
  if (!positive(oldFactor) || !positive(measuredPartNm) || !positive(indicatedNm)) return Number.NaN;
  return (oldFactor * measuredPartNm) / indicatedNm;
}

// ---------------------------------------------------------------------------------------------
// Crystal life

/**
 * Fraction of the crystal's usable frequency span already used, (f_bare − f_now)/(f_bare − f_min),
 * clamped to 0..1: a reading above the bare frequency (thermal transient) gives 0, one at or
 * below `fMinUsableHz` gives 1 (replace the crystal). NaN unless all are finite, > 0, and
 * `fMinUsableHz` < `fBareHz`.
 */
export function crystalLifeUsed(fBareHz: number, fNowHz: number, fMinUsableHz: number): number {
  if (!positive(fBareHz) || !positive(fNowHz) || !positive(fMinUsableHz) || fMinUsableHz >= fBareHz) {
    return Number.NaN;
  }
  const used = (fBareHz - fNowHz) / (fBareHz - fMinUsableHz);
  return used < 0 ? 0 : used > 1 ? 1 : used;
}
