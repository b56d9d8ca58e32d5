/**
 * AT-cut quartz constants for the crystal monitor, in CGS units (g, cm, s) as published.
 *
 * Sources: density and shear modulus as used by G. Sauerbrey, Z. Phys. 155, 206 (1959) and
 * C. Lu and O. Lewis, J. Appl. Phys. 43, 4385 (1972); values as listed in the project's
 * reference/physics-notes.md ("Quartz crystal monitor"). The acoustic impedance and the
 * frequency constant are derived here from those two, not entered separately, so that every
 * formula in the crystal module agrees with every other to the last digit.
 */

/** Density of AT-cut quartz ρ_q, g/cm³ (Sauerbrey 1959; Lu & Lewis 1972; physics-notes). */
export const QUARTZ_DENSITY_G_PER_CM3 = 2.648;

/**
 * Shear modulus of AT-cut quartz for the thickness-shear mode μ_q, g cm⁻¹ s⁻² (= dyn/cm²)
 * (Sauerbrey 1959; Lu & Lewis 1972; physics-notes).
 */
export const QUARTZ_SHEAR_MODULUS_G_PER_CM_S2 = 2.947e11;

/**
 * Acoustic (shear-wave) impedance of quartz Z_q = √(ρ_q μ_q), g cm⁻² s⁻¹. Derived;
 * ≈ 8.834e5 (physics-notes).
 */
export const QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S = Math.sqrt(
  QUARTZ_DENSITY_G_PER_CM3 * QUARTZ_SHEAR_MODULUS_G_PER_CM_S2,
);

/** Shear-wave velocity in quartz v_q = √(μ_q/ρ_q), cm/s. Derived; ≈ 3.336e5. */
export const QUARTZ_SHEAR_VELOCITY_CM_PER_S = Math.sqrt(
  QUARTZ_SHEAR_MODULUS_G_PER_CM_S2 / QUARTZ_DENSITY_G_PER_CM3,
);

/**
 * Frequency constant of AT-cut quartz N_q = f_q·d_q = v_q/2, Hz·cm: a free plate of thickness
 * d_q resonates in its fundamental thickness-shear mode at f_q = N_q/d_q (half a shear wavelength
 * across the plate; Lu & Lewis 1972). Derived from ρ_q and μ_q: 1.66802e5, i.e. the published
 * 1.668e5 Hz·cm (physics-notes). The derived value, not the rounded one, reproduces the
 * physics-notes check values to all their digits.
 */
export const QUARTZ_FREQUENCY_CONSTANT_HZ_CM = QUARTZ_SHEAR_VELOCITY_CM_PER_S / 2;
