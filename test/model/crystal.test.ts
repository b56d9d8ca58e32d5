import { describe, it, expect } from 'vitest';
import fc from 'fast-check';
import {
  QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S,
  QUARTZ_DENSITY_G_PER_CM3,
  QUARTZ_FREQUENCY_CONSTANT_HZ_CM,
  QUARTZ_SHEAR_MODULUS_G_PER_CM_S2,
  QUARTZ_SHEAR_VELOCITY_CM_PER_S,
  crystalLifeUsed,
  crystalThicknessFromPartNm,
  partThicknessFromCrystalNm,
  recalibrateTooling,
  sauerbreySensitivity,
  sauerbreySensitivityHzCm2PerUg,
  sauerbreyThicknessNm,
  stackFrequencyHz,
  stackThicknessNm,
  toolingFactor,
  zMatchFrequencyHz,
  zMatchThicknessNm,
} from '../../src/model/crystal/index.ts';
import type { CrystalLayer } from '../../src/model/crystal/index.ts';

const Z_Q = QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S;
const CM_PER_NM = 1e-7;

function relErr(actual: number, expected: number): number {
  return Math.abs(actual - expected) / Math.abs(expected);
}

// Arbitraries for the property tests: the ranges of the task (Z 0.2–3, density 1–10 g/cm³,
// thickness up to 50 µm), crystals from 4 to 10 MHz (the range of monitor crystals, common
// practice, no source). Below 1 nm the frequency shift nears the Float64 resolution of f itself,
// so thickness round trips are asked from 1 nm up.
const fBare = fc.double({ min: 4e6, max: 10e6, noNaN: true });
const zRatio = fc.double({ min: 0.2, max: 3, noNaN: true });
const density = fc.double({ min: 1, max: 10, noNaN: true });
const thickness = fc.double({ min: 1, max: 50_000, noNaN: true });
const layer = fc.record({ thicknessNm: thickness, densityGPerCm3: density, zRatio });

/** The resonance condition as the transmission-line model states it (poles and all). */
function impedanceResidual(fBareHz: number, fHz: number, layers: readonly CrystalLayer[]): number {
  // X_in = Z_i (X + Z_i tan φ_i)/(Z_i − X tan φ_i), free outer surface X = 0 (acoustic
  // transmission-line impedance translation, e.g. Kinsler et al., Fundamentals of Acoustics; from memory)
  let x = 0;
  for (let i = layers.length - 1; i >= 0; i--) {
    const l = layers[i] as CrystalLayer;
    const z = Z_Q / l.zRatio;
    const v = z / l.densityGPerCm3;
    const t = Math.tan((2 * Math.PI * fHz * l.thicknessNm * CM_PER_NM) / v);
    x = (z * (x + z * t)) / (z - x * t);
  }
  const q = Z_Q * Math.tan((Math.PI * fHz) / fBareHz);
  return (q + x) / (Math.abs(q) + Math.abs(x) + Z_Q);
}

/** Stress at the quartz's back face for unit velocity at the film's free face (pole-free form). */
function backFaceStress(fBareHz: number, fHz: number, layers: readonly CrystalLayer[]): number {
  // (stress, velocity) transfer across a uniform layer, in real form: A' = A cos φ + Z B sin φ,
  // B' = B cos φ − (A/Z) sin φ; free faces A = 0 (plane-wave layer matrix; from memory)
  let a = 0;
  let b = 1;
  const step = (z: number, phi: number): void => {
    const c = Math.cos(phi);
    const s = Math.sin(phi);
    const a2 = a * c + z * b * s;
    b = b * c - (a / z) * s;
    a = a2;
  };
  for (let i = layers.length - 1; i >= 0; i--) {
    const l = layers[i] as CrystalLayer;
    const z = Z_Q / l.zRatio;
    step(z, (2 * Math.PI * fHz * l.thicknessNm * CM_PER_NM * l.densityGPerCm3) / z);
  }
  step(Z_Q, (Math.PI * fHz) / fBareHz);
  return a;
}

describe('quartz constants', () => {
  it('derives Z_q and N_q from ρ_q and μ_q as published', () => {
    // physics-notes: ρ_q = 2.648 g/cm³, μ_q = 2.947e11 g cm⁻¹ s⁻²; Z_q = 8.834e5, N_q = 1.668e5
    expect(QUARTZ_DENSITY_G_PER_CM3).toBe(2.648);
    expect(QUARTZ_SHEAR_MODULUS_G_PER_CM_S2).toBe(2.947e11);
    expect(QUARTZ_ACOUSTIC_IMPEDANCE_G_PER_CM2_S / 1e5).toBeCloseTo(8.834, 3);
    expect(QUARTZ_FREQUENCY_CONSTANT_HZ_CM / 1e5).toBeCloseTo(1.668, 3);
    // N_q = v/2 and Z_q = ρ_q v (plane shear wave; Lu & Lewis 1972)
    expect(relErr(2 * QUARTZ_FREQUENCY_CONSTANT_HZ_CM, QUARTZ_SHEAR_VELOCITY_CM_PER_S)).toBeLessThan(1e-15);
    expect(relErr(QUARTZ_DENSITY_G_PER_CM3 * QUARTZ_SHEAR_VELOCITY_CM_PER_S, Z_Q)).toBeLessThan(1e-15);
  });
});

describe('Sauerbrey', () => {
  it('gives the physics-notes sensitivities at 5 and 6 MHz', () => {
    // physics-notes (derived): 56.60 Hz cm²/µg at 5 MHz, 81.50 at 6 MHz; tolerance half the last digit
    expect(sauerbreySensitivityHzCm2PerUg(5e6)).toBeCloseTo(56.6, 2);
    expect(sauerbreySensitivityHzCm2PerUg(6e6)).toBeCloseTo(81.5, 2);
    // the same in Hz cm²/g
    expect(sauerbreySensitivity(5e6) / 1e7).toBeCloseTo(5.66, 3);
  });

  it('matches the commonly published 56.6 Hz cm² µg⁻¹ for a 5 MHz crystal', () => {
    // QCM literature value for 5 MHz AT-cut (from memory); tolerance ±0.05
    expect(sauerbreySensitivityHzCm2PerUg(5e6)).toBeCloseTo(56.6, 1);
  });

  it('scales as f0²', () => {
    // C_f ∝ f0² (Sauerbrey 1959)
    expect(relErr(sauerbreySensitivity(10e6), 4 * sauerbreySensitivity(5e6))).toBeLessThan(1e-15);
  });

  it('gives the physics-notes linear thickness', () => {
    // physics-notes (derived): ρ_f = 2.20, f_q = 6 MHz, f_c = 5.5 MHz → 27884.6 nm; ±0.05 nm
    expect(sauerbreyThicknessNm(6e6, 5.5e6, 2.2)).toBeCloseTo(27884.6, 1);
    expect(sauerbreyThicknessNm(6e6, 6e6, 2.2)).toBe(0);
  });

  it('returns NaN for bad input', () => {
    for (const v of [0, -5e6, Number.NaN, Number.POSITIVE_INFINITY]) expect(sauerbreySensitivity(v)).toBeNaN();
    expect(sauerbreyThicknessNm(6e6, 6.1e6, 2.2)).toBeNaN();
    expect(sauerbreyThicknessNm(6e6, 5.9e6, -2.2)).toBeNaN();
    expect(sauerbreyThicknessNm(6e6, 5.9e6, 0)).toBeNaN();
    expect(sauerbreyThicknessNm(Number.NaN, 5.9e6, 2.2)).toBeNaN();
    expect(sauerbreyThicknessNm(6e6, Number.NEGATIVE_INFINITY, 2.2)).toBeNaN();
  });
});

describe('Lu–Lewis Z-match thickness', () => {
  // physics-notes derived checks: ρ_f = 2.20 g/cm³, f_q = 6 MHz; tolerance half the last digit given
  it.each([
    { fc: 5.9e6, z: 1, nm: 5671.44, digits: 2 },
    { fc: 5.9e6, z: 0.4, nm: 5675.79, digits: 2 },
    { fc: 5.5e6, z: 1, nm: 30419.5, digits: 1 },
    { fc: 5.5e6, z: 0.4, nm: 31015.7, digits: 1 },
    { fc: 5.99e6, z: 1, nm: 558.622, digits: 3 },
    { fc: 5.99e6, z: 0.4, nm: 558.627, digits: 3 },
  ])('f_c = $fc Hz, Z = $z → $nm nm (physics-notes)', ({ fc: fLoaded, z, nm, digits }) => {
    expect(zMatchThicknessNm(6e6, fLoaded, 2.2, z)).toBeCloseTo(nm, digits);
  });

  it('equals (N_q ρ_q/ρ_f)(1/f_c − 1/f_q) at Z = 1', () => {
    // physics-notes / Lu & Lewis 1972: exact closed form at Z = 1
    fc.assert(
      fc.property(fBare, fc.double({ min: 0.05, max: 0.999999, noNaN: true }), density, (fq, ratio, rho) => {
        const fLoaded = fq * ratio;
        const closed =
          ((QUARTZ_FREQUENCY_CONSTANT_HZ_CM * QUARTZ_DENSITY_G_PER_CM3) / rho) * (1 / fLoaded - 1 / fq) / CM_PER_NM;
        expect(relErr(zMatchThicknessNm(fq, fLoaded, rho, 1), closed)).toBeLessThan(1e-9);
      }),
    );
  });

  it('is the printed arctan formula below f_q/2 loss, and continuous across tan’s pole', () => {
    const fq = 6e6;
    const rho = 5;
    const z = 0.4;
    // t_f = (N_q ρ_q/(π ρ_f f_c Z)) arctan(Z tan(π(f_q − f_c)/f_q)) (Lu & Lewis 1972), principal arctan
    const printed = (fLoaded: number): number =>
      ((QUARTZ_FREQUENCY_CONSTANT_HZ_CM * QUARTZ_DENSITY_G_PER_CM3) / (Math.PI * rho * fLoaded * z)) *
      Math.atan(z * Math.tan((Math.PI * (fq - fLoaded)) / fq)) /
      CM_PER_NM;
    expect(relErr(zMatchThicknessNm(fq, 4.2e6, rho, z), printed(4.2e6))).toBeLessThan(1e-12);
    // past the pole (f_c < f_q/2) the continuous branch is the principal one plus π
    const beyond = 2.5e6;
    const branchShift =
      ((QUARTZ_FREQUENCY_CONSTANT_HZ_CM * QUARTZ_DENSITY_G_PER_CM3) / (rho * beyond * z)) / CM_PER_NM;
    expect(relErr(zMatchThicknessNm(fq, beyond, rho, z), printed(beyond) + branchShift)).toBeLessThan(1e-12);
    // either side of f_q/2 the thickness differs by about the slope times the step, not by a jump
    const above = zMatchThicknessNm(fq, fq / 2 + 1, rho, z);
    const below = zMatchThicknessNm(fq, fq / 2 - 1, rho, z);
    expect(below).toBeGreaterThan(above);
    expect(below - above).toBeLessThan(1); // nm, for a 2 Hz step where the film is ~10⁵ nm thick
  });

  it('grows with the load and exceeds the linear Sauerbrey estimate for Z < 1', () => {
    // physics-notes derived values: Z = 0.4 > Z = 1 > linear Sauerbrey at f_c = 5.5 MHz
    const linear = sauerbreyThicknessNm(6e6, 5.5e6, 2.2);
    const matched = zMatchThicknessNm(6e6, 5.5e6, 2.2, 1);
    const soft = zMatchThicknessNm(6e6, 5.5e6, 2.2, 0.4);
    expect(matched).toBeGreaterThan(linear);
    expect(soft).toBeGreaterThan(matched);
  });

  it('returns NaN for bad input', () => {
    expect(zMatchThicknessNm(6e6, 6.000001e6, 2.2, 1)).toBeNaN();
    expect(zMatchThicknessNm(6e6, 0, 2.2, 1)).toBeNaN();
    expect(zMatchThicknessNm(6e6, 5.9e6, -1, 1)).toBeNaN();
    expect(zMatchThicknessNm(6e6, 5.9e6, 2.2, 0)).toBeNaN();
    expect(zMatchThicknessNm(6e6, 5.9e6, 2.2, Number.NaN)).toBeNaN();
    expect(zMatchThicknessNm(Number.POSITIVE_INFINITY, 5.9e6, 2.2, 1)).toBeNaN();
    expect(zMatchThicknessNm(6e6, 6e6, 2.2, 0.4)).toBe(0);
  });
});

describe('Lu–Lewis inverse (thickness → frequency)', () => {
  it('reproduces the physics-notes frequencies from their thicknesses', () => {
    // physics-notes derived checks, read backwards: 31015.7 nm at Z = 0.4 ↔ 5.5 MHz (ρ_f 2.20, f_q 6 MHz)
    expect(zMatchFrequencyHz(6e6, 31015.7, 2.2, 0.4) / 1e6).toBeCloseTo(5.5, 5);
    expect(zMatchFrequencyHz(6e6, 558.627, 2.2, 0.4) / 1e6).toBeCloseTo(5.99, 6);
  });

  it('round-trips thickness → frequency → thickness to 1e-9', () => {
    fc.assert(
      fc.property(fBare, thickness, density, zRatio, (fq, t, rho, z) => {
        const f = zMatchFrequencyHz(fq, t, rho, z);
        expect(f).toBeGreaterThan(0);
        expect(f).toBeLessThan(fq);
        expect(relErr(zMatchThicknessNm(fq, f, rho, z), t)).toBeLessThan(1e-9);
      }),
      { numRuns: 500 },
    );
  });

  it('round-trips frequency → thickness → frequency to 1e-12', () => {
    fc.assert(
      fc.property(fBare, fc.double({ min: 0.05, max: 0.9999, noNaN: true }), density, zRatio, (fq, ratio, rho, z) => {
        const fLoaded = fq * ratio;
        const t = zMatchThicknessNm(fq, fLoaded, rho, z);
        expect(relErr(zMatchFrequencyHz(fq, t, rho, z), fLoaded)).toBeLessThan(1e-12);
      }),
      // a load near f_q/2 at small Z, where the arctan's flank is steep and plain Newton cycles
      { numRuns: 500, examples: [[4e6, 0.4997829027654828, 1, 0.2]] },
    );
  });

  it('falls strictly as the film thickens', () => {
    fc.assert(
      fc.property(fBare, thickness, thickness, density, zRatio, (fq, t1, t2, rho, z) => {
        const [thin, thick] = t1 < t2 ? [t1, t2] : [t2, t1];
        const fThin = zMatchFrequencyHz(fq, thin, rho, z);
        const fThick = zMatchFrequencyHz(fq, thick, rho, z);
        // never rising; strictly falling once the step is above the Float64 resolution of f
        expect(fThick).toBeLessThanOrEqual(fThin);
        if (thick > thin * (1 + 1e-9)) expect(fThick).toBeLessThan(fThin);
      }),
    );
  });

  it('gives f_q for no film and NaN for bad input', () => {
    expect(zMatchFrequencyHz(6e6, 0, 2.2, 0.4)).toBe(6e6);
    expect(zMatchFrequencyHz(6e6, -1, 2.2, 0.4)).toBeNaN();
    expect(zMatchFrequencyHz(6e6, 100, 0, 0.4)).toBeNaN();
    expect(zMatchFrequencyHz(6e6, 100, 2.2, -0.4)).toBeNaN();
    expect(zMatchFrequencyHz(-6e6, 100, 2.2, 0.4)).toBeNaN();
    expect(zMatchFrequencyHz(6e6, Number.POSITIVE_INFINITY, 2.2, 0.4)).toBeNaN();
  });
});

describe('several layers: exact acoustic model', () => {
  it('one layer equals Lu–Lewis, both ways, to 1e-9', () => {
    fc.assert(
      fc.property(fBare, layer, (fq, l) => {
        const f = stackFrequencyHz(fq, [l]);
        expect(relErr(f, zMatchFrequencyHz(fq, l.thicknessNm, l.densityGPerCm3, l.zRatio))).toBeLessThan(1e-9);
        const t = stackThicknessNm(fq, f, [], l);
        expect(relErr(t, zMatchThicknessNm(fq, f, l.densityGPerCm3, l.zRatio))).toBeLessThan(1e-9);
      }),
      { numRuns: 300 },
    );
  });

  it('two layers of one material equal one layer of the summed thickness', () => {
    fc.assert(
      fc.property(fBare, layer, thickness, (fq, l, extraNm) => {
        const split = stackFrequencyHz(fq, [l, { ...l, thicknessNm: extraNm }]);
        const whole = stackFrequencyHz(fq, [{ ...l, thicknessNm: l.thicknessNm + extraNm }]);
        expect(relErr(split, whole)).toBeLessThan(1e-9);
      }),
    );
  });

  it('with every layer matched (Z = 1) adds areal masses exactly in 1/f', () => {
    // Z = 1 for every layer: no reflections, so 1/f − 1/f_q = Σ ρ_i t_i / (N_q ρ_q) (Lu & Lewis 1972, Z = 1)
    fc.assert(
      fc.property(fBare, fc.array(fc.record({ thicknessNm: thickness, densityGPerCm3: density }), { minLength: 1, maxLength: 5 }), (fq, ls) => {
        const layers = ls.map((l) => ({ ...l, zRatio: 1 }));
        let mass = 0;
        for (const l of layers) mass += l.densityGPerCm3 * l.thicknessNm * CM_PER_NM;
        const expected = 1 / (1 / fq + mass / (QUARTZ_FREQUENCY_CONSTANT_HZ_CM * QUARTZ_DENSITY_G_PER_CM3));
        expect(relErr(stackFrequencyHz(fq, layers), expected)).toBeLessThan(1e-9);
      }),
    );
  });

  it('satisfies Z_q tan(πf/f_q) + X_load(f) = 0 at its lowest non-zero root', () => {
    fc.assert(
      fc.property(fBare, fc.array(layer, { minLength: 1, maxLength: 4 }), (fq, layers) => {
        const f = stackFrequencyHz(fq, layers);
        expect(f).toBeGreaterThan(0);
        expect(f).toBeLessThan(fq);
        expect(Math.abs(impedanceResidual(fq, f, layers))).toBeLessThan(1e-8);
        // the back-face stress changes sign at f and nowhere between 0 and f (fundamental mode)
        const above = backFaceStress(fq, f * (1 + 1e-7), layers);
        const below = backFaceStress(fq, f * (1 - 1e-7), layers);
        expect(Math.sign(above)).toBe(-Math.sign(below));
        for (let k = 1; k < 400; k++) {
          expect(Math.sign(backFaceStress(fq, (f * (1 - 1e-7) * k) / 400, layers))).toBe(Math.sign(below));
        }
      }),
      { numRuns: 100 },
    );
  });

  it('approaches the summed Sauerbrey shifts for thin layers', () => {
    // thin rigid films: Δf = C_f Σ ρ_i t_i (Sauerbrey 1959); Z-match corrections are O(Δf/f), ~1e-5 here
    const layers: CrystalLayer[] = [
      { thicknessNm: 5, densityGPerCm3: 4.2, zRatio: 0.5 },
      { thicknessNm: 8, densityGPerCm3: 2.2, zRatio: 1.07 },
      { thicknessNm: 3, densityGPerCm3: 8.0, zRatio: 2.5 },
    ];
    let mass = 0;
    for (const l of layers) mass += l.densityGPerCm3 * l.thicknessNm * CM_PER_NM;
    const shift = 6e6 - stackFrequencyHz(6e6, layers);
    expect(relErr(shift, sauerbreySensitivity(6e6) * mass)).toBeLessThan(1e-3);
  });

  it('recovers the top layer from the reading, to 1e-9', () => {
    fc.assert(
      fc.property(
        fBare,
        fc.array(layer, { minLength: 0, maxLength: 3 }),
        layer.filter((l) => l.thicknessNm >= 10),
        (fq, below, top) => {
          const f = stackFrequencyHz(fq, [...below, top]);
          expect(relErr(stackThicknessNm(fq, f, below, top), top.thicknessNm)).toBeLessThan(1e-9);
        },
      ),
      { numRuns: 300 },
    );
  });

  it('depends on the order of thick layers of different Z', () => {
    // a mass-only (Sauerbrey) picture would not see the order; the acoustic model must
    const a = { thicknessNm: 20_000, densityGPerCm3: 4.2, zRatio: 0.4 };
    const b = { thicknessNm: 20_000, densityGPerCm3: 2.2, zRatio: 2.5 };
    const ab = stackFrequencyHz(6e6, [a, b]);
    const ba = stackFrequencyHz(6e6, [b, a]);
    expect(relErr(ab, ba)).toBeGreaterThan(1e-4);
  });

  it('handles empty stacks, zero thickness and bad input', () => {
    expect(stackFrequencyHz(6e6, [])).toBe(6e6);
    expect(stackFrequencyHz(6e6, [{ thicknessNm: 0, densityGPerCm3: 2.2, zRatio: 1 }])).toBe(6e6);
    expect(stackFrequencyHz(6e6, [{ thicknessNm: -1, densityGPerCm3: 2.2, zRatio: 1 }])).toBeNaN();
    expect(stackFrequencyHz(6e6, [{ thicknessNm: 10, densityGPerCm3: 0, zRatio: 1 }])).toBeNaN();
    expect(stackFrequencyHz(6e6, [{ thicknessNm: 10, densityGPerCm3: 2.2, zRatio: Number.NaN }])).toBeNaN();
    expect(stackFrequencyHz(0, [])).toBeNaN();
    const film = { densityGPerCm3: 2.2, zRatio: 0.4 };
    const below = [{ thicknessNm: 1000, densityGPerCm3: 4.2, zRatio: 0.6 }];
    const fBelow = stackFrequencyHz(6e6, below);
    expect(stackThicknessNm(6e6, fBelow + 1, below, film)).toBeNaN(); // above the lower layers' own frequency
    expect(stackThicknessNm(6e6, 6.1e6, [], film)).toBeNaN();
    expect(stackThicknessNm(6e6, 5.9e6, [], { densityGPerCm3: -1, zRatio: 1 })).toBeNaN();
    expect(stackThicknessNm(6e6, 5.9e6, [{ thicknessNm: Number.NaN, densityGPerCm3: 1, zRatio: 1 }], film)).toBeNaN();
  });
});

describe('tooling factor', () => {
  it('recalibrates as in the physics-notes example', () => {
    // physics-notes: 100 % · 157/250 = 62.8 %, as fractions
    expect(recalibrateTooling(1.0, 157, 250)).toBeCloseTo(0.628, 12);
    expect(toolingFactor(157, 250)).toBeCloseTo(0.628, 12);
  });

  it('converts part ↔ crystal thickness and back', () => {
    // definition: part = crystal × tooling factor (physics-notes)
    expect(partThicknessFromCrystalNm(250, 0.628)).toBeCloseTo(157, 9);
    expect(crystalThicknessFromPartNm(157, 0.628)).toBeCloseTo(250, 9);
    fc.assert(
      fc.property(thickness, fc.double({ min: 0.2, max: 3, noNaN: true }), (t, tf) => {
        expect(relErr(crystalThicknessFromPartNm(partThicknessFromCrystalNm(t, tf), tf), t)).toBeLessThan(1e-14);
        expect(relErr(toolingFactor(partThicknessFromCrystalNm(t, tf), t), tf)).toBeLessThan(1e-14);
      }),
    );
  });

  it('returns NaN for bad input', () => {
    expect(toolingFactor(100, 0)).toBeNaN();
    expect(toolingFactor(-1, 100)).toBeNaN();
    expect(crystalThicknessFromPartNm(100, 0)).toBeNaN();
    expect(crystalThicknessFromPartNm(Number.NaN, 1)).toBeNaN();
    expect(partThicknessFromCrystalNm(100, -1)).toBeNaN();
    expect(recalibrateTooling(1, 157, 0)).toBeNaN();
    expect(recalibrateTooling(0, 157, 250)).toBeNaN();
    expect(recalibrateTooling(1, Number.POSITIVE_INFINITY, 250)).toBeNaN();
  });
});

describe('crystal life', () => {
  it('is the used fraction of the usable span, clamped to 0..1', () => {
    // definition (this module): (f_bare − f_now)/(f_bare − f_min)
    expect(crystalLifeUsed(6e6, 5.75e6, 5.5e6)).toBeCloseTo(0.5, 12);
    expect(crystalLifeUsed(6e6, 6e6, 5.5e6)).toBe(0);
    expect(crystalLifeUsed(6e6, 6.01e6, 5.5e6)).toBe(0);
    expect(crystalLifeUsed(6e6, 5.5e6, 5.5e6)).toBe(1);
    expect(crystalLifeUsed(6e6, 5.2e6, 5.5e6)).toBe(1);
  });

  it('returns NaN for bad input', () => {
    expect(crystalLifeUsed(6e6, 5.9e6, 6e6)).toBeNaN();
    expect(crystalLifeUsed(6e6, 5.9e6, 6.1e6)).toBeNaN();
    expect(crystalLifeUsed(6e6, Number.NaN, 5.5e6)).toBeNaN();
    expect(crystalLifeUsed(6e6, 5.9e6, 0)).toBeNaN();
  });
});
