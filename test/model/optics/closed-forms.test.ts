// The kernel against textbook closed forms. Each check names its source; "derived" marks a number
// computed here from the formula beside it (the physics notes, shared/reference/physics-notes.md,
// quote the same numbers as derived). EXACT is for identities the kernel must reproduce to
// rounding; quoted percentages are checked to half a unit of their last printed digit. Section
// numbers are those of Born & Wolf, Principles of Optics, 7th ed., and chapters of Macleod,
// Thin-Film Optical Filters (from memory).
import { describe, expect, it } from 'vitest';
import fc from 'fast-check';
import {
  buildOpticalModel,
  createOpticalResult,
  evaluate,
  layersMatrix,
  spectrum,
  type OpticalResult,
  type Polarisation,
  type StackSpec,
} from '../../../src/model/optics/optical-model.ts';
import type { Dispersion } from '../../../src/model/optics/dispersion.ts';

const EXACT = 1e-12;
const DEG = Math.PI / 180;
const LAMBDA0_NM = 550;

const constant = (n: number, k = 0): Dispersion => ({ model: 'constant', n, k });
const AIR = constant(1);

type Layer = StackSpec['layers'][number];

/** A coated substrate; `layers` in deposition order (layers[0] on the substrate). */
function coated(substrate: Dispersion, layers: readonly Layer[], incident: Dispersion = AIR): StackSpec {
  return { incident, layers, substrate, back: 'semi-infinite' };
}

const bare = (nSubstrate: number, nIncident = 1): StackSpec => coated(constant(nSubstrate), [], constant(nIncident));

/** A layer of optical thickness `quarters` × λ0/4 at normal incidence. */
function quarterWaves(n: number, quarters = 1, lambda0Nm = LAMBDA0_NM): Layer {
  return { dispersion: constant(n), thicknessNm: (quarters * lambda0Nm) / (4 * n) };
}

function solve(stack: StackSpec, wavelengthNm: number, angleDeg: number, pol: Polarisation): OpticalResult {
  return evaluate(createOpticalResult(), buildOpticalModel(stack, [wavelengthNm], angleDeg), 0, pol);
}

/** Normal-incidence reflectance between two lossless media (Fresnel; Born & Wolf §1.5.2–1.5.3). */
const fresnelR = (n0: number, n1: number): number => ((n0 - n1) / (n0 + n1)) ** 2;

describe('bare surface (Fresnel)', () => {
  it('normal incidence: R = ((n0 − ns)/(n0 + ns))², T = 4 n0 ns/(n0 + ns)², the same for s and p', () => {
    // Born & Wolf §1.5.2–1.5.3, the Fresnel formulae at θ = 0; Macleod ch. 2.
    for (const [n0, ns] of [[1, 1.5168], [1, 2.35], [1.52, 1], [1.33, 1.46]] as const) {
      for (const pol of ['s', 'p', 'mean'] as const) {
        const got = solve(bare(ns, n0), LAMBDA0_NM, 0, pol);
        expect(Math.abs(got.R - fresnelR(n0, ns))).toBeLessThan(EXACT);
        expect(Math.abs(got.T - (4 * n0 * ns) / (n0 + ns) ** 2)).toBeLessThan(EXACT);
        expect(Math.abs(got.A)).toBeLessThan(EXACT);
      }
    }
  });

  it('glass of n = 1.5168 (N-BK7 at the d line) reflects 4.2165 % (physics notes, derived)', () => {
    const got = solve(bare(1.5168), LAMBDA0_NM, 0, 's');
    expect(Math.abs(got.R - 0.042165)).toBeLessThan(5e-7);
    // The amplitude in our convention is real and negative (n0 < ns): r = (η0 − ηs)/(η0 + ηs), Macleod eq. 2.112.
    expect(Math.abs(got.rRe - (1 - 1.5168) / (1 + 1.5168))).toBeLessThan(EXACT);
    expect(Math.abs(got.rIm)).toBeLessThan(EXACT);
  });

  // Born & Wolf §1.5.2 (Fresnel formulae) and §1.5.3 (transmissivity), with sin θt = (n0/ns) sin θi:
  //   r⊥ = −sin(θi − θt)/sin(θi + θt),        r∥ = tan(θi − θt)/tan(θi + θt),
  //   T⊥ = sin 2θi sin 2θt / sin²(θi + θt),   T∥ = T⊥ / cos²(θi − θt).
  // Born & Wolf's r∥ changes sign against Macleod's p convention used by the kernel (there r_p = r_s at
  // normal incidence, here r∥ = −r⊥), so our r_p = −r∥; r_s = r⊥. Both are real below the critical angle.
  const obliqueCases = [
    { n0: 1, ns: 1.52, angles: [5, 30, 45, 60, 75, 89] },
    { n0: 1.52, ns: 1, angles: [5, 20, 35, 41] }, // internal, below the critical angle 41.14°
    { n0: 1, ns: 2.35, angles: [10, 50, 80] },
  ];
  for (const { n0, ns, angles } of obliqueCases) {
    it(`oblique s and p from ${n0} into ${ns}: R, T and r follow the Fresnel amplitude formulas`, () => {
      for (const angleDeg of angles) {
        const ti = angleDeg * DEG;
        const tt = Math.asin((n0 / ns) * Math.sin(ti));
        const rPerp = -Math.sin(ti - tt) / Math.sin(ti + tt);
        const rPar = Math.tan(ti - tt) / Math.tan(ti + tt);
        const tPerp = (Math.sin(2 * ti) * Math.sin(2 * tt)) / Math.sin(ti + tt) ** 2;
        const tPar = tPerp / Math.cos(ti - tt) ** 2;
        const s = solve(bare(ns, n0), LAMBDA0_NM, angleDeg, 's');
        const p = solve(bare(ns, n0), LAMBDA0_NM, angleDeg, 'p');
        expect(Math.abs(s.R - rPerp ** 2)).toBeLessThan(EXACT);
        expect(Math.abs(p.R - rPar ** 2)).toBeLessThan(EXACT);
        expect(Math.abs(s.T - tPerp)).toBeLessThan(EXACT);
        expect(Math.abs(p.T - tPar)).toBeLessThan(EXACT);
        expect(Math.abs(s.rRe - rPerp)).toBeLessThan(EXACT);
        expect(Math.abs(p.rRe + rPar)).toBeLessThan(EXACT);
        expect(Math.abs(s.rIm)).toBeLessThan(EXACT);
        expect(Math.abs(p.rIm)).toBeLessThan(EXACT);
      }
    });
  }
});

describe("Brewster's angle", () => {
  // Born & Wolf §1.5.3: r∥ = 0 when θi + θt = 90°, i.e. tan θB = ns/n0. There r⊥ = −sin(θi − θt) =
  // cos 2θB, so R_s = ((ns² − n0²)/(ns² + n0²))² (derived from the same formulas).
  for (const [n0, ns] of [[1, 1.52], [1.52, 1], [1, 2.35]] as const) {
    it(`from ${n0} into ${ns}: R_p vanishes at atan(ns/n0), R_s does not`, () => {
      const brewsterDeg = Math.atan(ns / n0) / DEG;
      const p = solve(bare(ns, n0), LAMBDA0_NM, brewsterDeg, 'p');
      const s = solve(bare(ns, n0), LAMBDA0_NM, brewsterDeg, 's');
      expect(p.R).toBeLessThan(1e-20); // |r_p| is a rounding residue (~1e-16), so R_p ~ 1e-32
      expect(Math.abs(s.R - ((ns * ns - n0 * n0) / (ns * ns + n0 * n0)) ** 2)).toBeLessThan(EXACT);
      expect(s.R).toBeGreaterThan(0.01);
      // A sharp zero, not a flat floor: one degree either side R_p is back above 1e-5 (derived: ≈1.1e-4
      // and 1.2e-4 for 1 → 1.52 from the r∥ formula above).
      for (const offsetDeg of [-1, 1]) {
        expect(solve(bare(ns, n0), LAMBDA0_NM, brewsterDeg + offsetDeg, 'p').R).toBeGreaterThan(1e-5);
      }
    });
  }
});

describe('total internal reflection, glass n = 1.52 to air', () => {
  const glassToAir = bare(1, 1.52);
  const criticalDeg = Math.asin(1 / 1.52) / DEG; // 41.14° (Snell's law)
  const beyond = [42, 45, 60, 75, 85, 89.5];

  it('R = 1 and T = 0 beyond the critical angle for s and p, and R < 1 just below it', () => {
    // Born & Wolf §1.5.4: beyond the critical angle |r⊥| = |r∥| = 1 and no energy crosses.
    for (const angleDeg of beyond) {
      for (const pol of ['s', 'p', 'mean'] as const) {
        const got = solve(glassToAir, LAMBDA0_NM, angleDeg, pol);
        expect(Math.abs(got.R - 1)).toBeLessThan(EXACT);
        expect(Math.abs(got.T)).toBeLessThan(EXACT);
        expect(Math.abs(got.A)).toBeLessThan(EXACT);
      }
    }
    for (const pol of ['s', 'p'] as const) {
      const below = solve(glassToAir, LAMBDA0_NM, criticalDeg - 0.5, pol);
      expect(below.R).toBeLessThan(0.9);
      expect(below.T).toBeGreaterThan(0.1);
    }
  });

  it('reflection phase: tan(φ_s/2) = √(sin²θ − n²)/cos θ and tan(φ_p/2) = √(sin²θ − n²)/(n² cos θ)', () => {
    // Closed form: Born & Wolf §1.5.4 (n = n_air/n_glass the relative index), in magnitude.
    // The sign, worked out here for our convention: with exp(+iωt) the wave in air beyond the critical
    // angle goes as exp(−i k0 q z) with q = √(1 − n_glass² sin²θ); the kernel takes the decaying branch
    // q = −i·b, b = √(n_glass² sin²θ − 1) > 0 (Im q < 0). Then, with a = n_glass cos θ,
    //   r_s = (a − q)/(a + q) = (a + ib)/(a − ib) = exp(+2iψ),  tan ψ = b/a = √(sin²θ − n²)/cos θ,
    // a phase *advance* φ_s = +2ψ ∈ (0, π). Under exp(−iωt) the decaying branch is q = +ib and every
    // amplitude is the complex conjugate, so the usual texts find exp(−2iψ): the same magnitude, the
    // opposite sign. For p, η_p = N²/q gives r_p = (a' − i/b)/(a' + i/b) with a' = n_glass/cos θ, so
    // −r_p = exp(+2iχ), tan χ = n_glass b / cos θ = √(sin²θ − n²)/(n² cos θ): the extra minus is
    // Macleod's p sign (r_p = r_s at normal incidence), the conjugation as for s. Choosing the growing
    // branch, or N = n + ik with exp(+iωt), flips the sign of both phases and fails this test.
    const n = 1 / 1.52;
    for (const angleDeg of beyond) {
      const t = angleDeg * DEG;
      const root = Math.sqrt(Math.sin(t) ** 2 - n * n);
      const phiS = 2 * Math.atan(root / Math.cos(t));
      const phiP = 2 * Math.atan(root / (n * n * Math.cos(t)));
      const s = solve(glassToAir, LAMBDA0_NM, angleDeg, 's');
      const p = solve(glassToAir, LAMBDA0_NM, angleDeg, 'p');
      expect(Math.abs(Math.atan2(s.rIm, s.rRe) - phiS)).toBeLessThan(EXACT);
      expect(Math.abs(Math.atan2(-p.rIm, -p.rRe) - phiP)).toBeLessThan(EXACT);
      expect(phiS).toBeGreaterThan(0); // the advance is strict, so a conjugated result cannot pass
    }
  });
});

describe('single layers at their design wavelength (normal incidence)', () => {
  // Macleod, Thin-Film Optical Filters, ch. 3 (quarter-wave layer: Y = n1²/ns).
  const quarterWaveR = (n0: number, n1: number, ns: number): number =>
    ((n0 * ns - n1 * n1) / (n0 * ns + n1 * n1)) ** 2;

  it('quarter-wave: R = ((n0 ns − n1²)/(n0 ns + n1²))², 1.38 → 1.2601 %, 2.35 → 32.3005 % on 1.52', () => {
    for (const [n1, quoted] of [[1.38, 0.012601], [2.35, 0.323005]] as const) {
      const got = solve(coated(constant(1.52), [quarterWaves(n1)]), LAMBDA0_NM, 0, 's');
      expect(Math.abs(got.R - quarterWaveR(1, n1, 1.52))).toBeLessThan(EXACT);
      expect(Math.abs(got.R - quoted)).toBeLessThan(5e-7); // physics notes, derived
      expect(Math.abs(got.R + got.T - 1)).toBeLessThan(EXACT);
    }
  });

  it('three quarter-waves act as one (R repeats at odd multiples)', () => {
    // Macleod ch. 3: the admittance transform of a layer depends on δ mod π.
    const got = solve(coated(constant(1.52), [quarterWaves(2.35, 3)]), LAMBDA0_NM, 0, 'p');
    expect(Math.abs(got.R - quarterWaveR(1, 2.35, 1.52))).toBeLessThan(EXACT);
  });

  it('half-wave: absent at its design wavelength (R equals the bare substrate), present elsewhere', () => {
    // Macleod ch. 3 ("absentee layer"); physics notes.
    for (const n1 of [1.38, 1.63, 2.35]) {
      const stack = coated(constant(1.52), [quarterWaves(n1, 2)]);
      const got = solve(stack, LAMBDA0_NM, 0, 's');
      expect(Math.abs(got.R - fresnelR(1, 1.52))).toBeLessThan(EXACT);
      expect(Math.abs(got.T - (1 - fresnelR(1, 1.52)))).toBeLessThan(EXACT);
      // At 0.8 λ0 the same layer is no longer absent (derived from the same formula, R moves by > 1e-3).
      expect(Math.abs(solve(stack, 0.8 * LAMBDA0_NM, 0, 's').R - fresnelR(1, 1.52))).toBeGreaterThan(1e-3);
    }
  });
});

describe('two quarter-waves (V-coat)', () => {
  // Macleod ch. 3: with n1 the outer and n2 the inner layer, Y = n1² ns / n2² and
  // R = ((n0 n2² − ns n1²)/(n0 n2² + ns n1²))².
  const vCoatR = (n0: number, nOuter: number, nInner: number, ns: number): number =>
    ((n0 * nInner ** 2 - ns * nOuter ** 2) / (n0 * nInner ** 2 + ns * nOuter ** 2)) ** 2;

  it('1.38 outer on 1.63 inner on 1.52 → 0.18346 %; the reversed order follows the same formula', () => {
    // Deposition order: layers[0] (inner, on the substrate) is 1.63, layers[1] (outer) is 1.38.
    const got = solve(coated(constant(1.52), [quarterWaves(1.63), quarterWaves(1.38)]), LAMBDA0_NM, 0, 's');
    expect(Math.abs(got.R - vCoatR(1, 1.38, 1.63, 1.52))).toBeLessThan(EXACT);
    expect(Math.abs(got.R - 0.0018346)).toBeLessThan(5e-8); // physics notes, derived
    const reversed = solve(coated(constant(1.52), [quarterWaves(1.38), quarterWaves(1.63)]), LAMBDA0_NM, 0, 's');
    expect(Math.abs(reversed.R - vCoatR(1, 1.63, 1.38, 1.52))).toBeLessThan(EXACT);
    expect(reversed.R).toBeGreaterThan(0.05); // derived: ≈ 12.9 %, so a swapped order cannot pass
  });

  it('R = 0 when n2/n1 = √(ns/n0), inner layer the higher index', () => {
    const nOuter = 1.38;
    const nInner = nOuter * Math.sqrt(1.52 / 1);
    const got = solve(coated(constant(1.52), [quarterWaves(nInner), quarterWaves(nOuter)]), LAMBDA0_NM, 0, 's');
    expect(got.R).toBeLessThan(1e-20); // exact zero up to rounding of the amplitude (~1e-16)
    const swapped = solve(coated(constant(1.52), [quarterWaves(nOuter), quarterWaves(nInner)]), LAMBDA0_NM, 0, 's');
    expect(swapped.R).toBeGreaterThan(0.05);
  });
});

describe('quarter-wave mirror (HL)^N H, 2.35 / 1.46 on 1.52', () => {
  const nH = 2.35;
  const nL = 1.46;
  const nS = 1.52;
  /** H next to the substrate and H outermost (the sequence reads the same either way). */
  function mirror(periods: number, lambda0Nm = LAMBDA0_NM): StackSpec {
    const layers: Layer[] = [quarterWaves(nH, 1, lambda0Nm)];
    for (let i = 0; i < periods; i++) layers.push(quarterWaves(nL, 1, lambda0Nm), quarterWaves(nH, 1, lambda0Nm));
    return coated(constant(nS), layers);
  }

  it('peak R: Y = (nH/nL)^(2N) nH²/ns, R = ((n0 − Y)/(n0 + Y))²; N = 5 → 99.0612 %, N = 10 → 99.99192 %', () => {
    // Macleod ch. 6 (quarter-wave stack reflectance at λ0).
    for (const [periods, quoted, digits] of [[5, 0.990612, 5e-7], [10, 0.9999192, 5e-8]] as const) {
      const y = (nH / nL) ** (2 * periods) * (nH * nH) / nS;
      const expected = ((1 - y) / (1 + y)) ** 2;
      const got = solve(mirror(periods), LAMBDA0_NM, 0, 's');
      expect(Math.abs(got.R - expected)).toBeLessThan(EXACT);
      expect(Math.abs(got.R - quoted)).toBeLessThan(digits); // physics notes, derived
    }
  });

  // Stop band of the infinite quarter-wave stack (Macleod ch. 6): full width in g = λ0/λ
  // Δg = (4/π) arcsin((nH − nL)/(nH + nL)); edges at g = 1 ± Δg/2.
  const deltaG = (4 / Math.PI) * Math.asin((nH - nL) / (nH + nL));
  const shortEdgeNm = LAMBDA0_NM / (1 + deltaG / 2);
  const longEdgeNm = LAMBDA0_NM / (1 - deltaG / 2);

  it('closed-form width 0.300197, edges 478.22 and 647.13 nm (physics notes, derived)', () => {
    expect(Math.abs(deltaG - 0.300197)).toBeLessThan(5e-7);
    expect(Math.abs(shortEdgeNm - 478.22)).toBeLessThan(0.005);
    expect(Math.abs(longEdgeNm - 647.13)).toBeLessThan(0.005);
  });

  it("the edges are where |Tr M_period|/2 = 1 for the kernel's matrix of one HL period", () => {
    // The closed form is exactly the Bloch condition |½ Tr M| = 1 of one HL period (Macleod ch. 6;
    // Yeh, Optical Waves in Layered Media, ch. 6). `layersMatrix` gives the period's characteristic
    // matrix (re/im pairs M11 M12 M21 M22); lossless at normal incidence its diagonal is real. The trace
    // does not depend on which layer of the period comes first.
    const halfTrace = (wavelengthNm: number): number => {
      const model = buildOpticalModel(coated(constant(nS), [quarterWaves(nL), quarterWaves(nH)]), [wavelengthNm], 0);
      const m = layersMatrix(new Float64Array(8), model, 0, 's', model.thicknessNm, 0, 2);
      return ((m[0] as number) + (m[6] as number)) / 2;
    };
    expect(halfTrace(LAMBDA0_NM)).toBeLessThan(-1); // in the band at λ0: −(nH/nL + nL/nH)/2
    // Bisection on ½ Tr M + 1 between the band centre and a point well outside on either side.
    const edge = (insideNm: number, outsideNm: number): number => {
      let inside = insideNm;
      let outside = outsideNm;
      expect(halfTrace(outside)).toBeGreaterThan(-1);
      for (let i = 0; i < 60; i++) {
        const mid = (inside + outside) / 2;
        if (halfTrace(mid) < -1) inside = mid;
        else outside = mid;
      }
      return (inside + outside) / 2;
    };
    expect(Math.abs(edge(LAMBDA0_NM, 420) - shortEdgeNm)).toBeLessThan(1e-9);
    expect(Math.abs(edge(LAMBDA0_NM, 750) - longEdgeNm)).toBeLessThan(1e-9);
  });

  it('a long mirror (HL)^60 H falls through R = 50 % within 1 nm outside each closed-form edge', () => {
    // Edge criterion: walking out from λ0, the first wavelength where R drops below 50 %.
    // Why the tolerance: the closed form is for the infinite stack. A finite stack of N periods still
    // transmits little exactly at the Bloch edge (there its 1/T grows as N²), so it reaches 50 % a
    // little *outside* the edge, by an amount that shrinks as 1/N² (the first transmission peak beyond
    // the edge sits at Bloch phase π(1 − 1/N)). For N = 60 the shift is a few tenths of a nanometre
    // (derived here: about 0.3 nm short side, 0.6 nm long side; 1.7 and 3.1 nm for N = 25), so ±1 nm
    // bounds it with margin while a 1 % error in Δg (≈ 1.6 nm at the long edge) would not pass.
    const stepNm = 0.02;
    const startNm = 460;
    const grid = Array.from({ length: Math.round((670 - startNm) / stepNm) + 1 }, (_, i) => startNm + i * stepNm);
    const model = buildOpticalModel(mirror(60), grid, 0);
    const out = { R: new Float64Array(grid.length), T: new Float64Array(grid.length), A: new Float64Array(grid.length) };
    spectrum(out, model, 's');
    const centre = Math.round((LAMBDA0_NM - startNm) / stepNm);
    expect(out.R[centre]).toBeGreaterThan(0.999999);
    /** Linear interpolation of the 50 % crossing walking from the centre in direction `dir`. */
    const crossing = (dir: 1 | -1): number => {
      let i = centre;
      while ((out.R[i + dir] as number) >= 0.5) i += dir;
      const a = out.R[i] as number;
      const b = out.R[i + dir] as number;
      return (grid[i] as number) + dir * stepNm * ((a - 0.5) / (a - b));
    };
    const shortNm = crossing(-1);
    const longNm = crossing(1);
    expect(shortNm).toBeLessThan(shortEdgeNm);
    expect(shortNm).toBeGreaterThan(shortEdgeNm - 1);
    expect(longNm).toBeGreaterThan(longEdgeNm);
    expect(longNm).toBeLessThan(longEdgeNm + 1);
  });
});

describe('thick lossless slab in air, normal incidence, intensities added (incoherent)', () => {
  // T = 2n/(n² + 1) (physics notes; Macleod ch. 2 / Heavens ch. 4, sum of the multiple passes), and with
  // R1 the single-face reflectance R = R1 + (1 − R1)² R1/(1 − R1²) = 2R1/(1 + R1) (derived).
  for (const n of [1.5168, 1.52, 2.35]) {
    it(`n = ${n}`, () => {
      const slab: StackSpec = { incident: AIR, layers: [], substrate: constant(n), back: 'incoherent', substrateThicknessNm: 1e6 };
      const r1 = fresnelR(1, n);
      for (const pol of ['s', 'p'] as const) {
        const got = solve(slab, LAMBDA0_NM, 0, pol);
        expect(Math.abs(got.T - (2 * n) / (n * n + 1))).toBeLessThan(EXACT);
        expect(Math.abs(got.R - (2 * r1) / (1 + r1))).toBeLessThan(EXACT);
        expect(Math.abs(got.A)).toBeLessThan(EXACT);
      }
    });
  }
});

describe('thick weakly absorbing slab in air, normal incidence, incoherent', () => {
  // Intensities summed over the passes of a plate with single-face reflectance R1 and one-pass
  // transmission τ = exp(−4πkd/λ): R = R1 + (1 − R1)² R1 τ²/(1 − R1² τ²), T = (1 − R1)² τ/(1 − R1² τ²)
  // (Heavens, Optical Properties of Thin Solid Films, ch. 4; Macleod ch. 2; from memory). The face
  // reflectance of a bulk of index n − ik is R1 = ((n − 1)² + k²)/((n + 1)² + k²) (Born & Wolf §14.2).
  it('n = 1.52, k = 1e-5, 1 mm at 550 nm (τ ≈ 0.80)', () => {
    const n = 1.52;
    const k = 1e-5;
    const thicknessNm = 1e6;
    const r1 = ((n - 1) ** 2 + k * k) / ((n + 1) ** 2 + k * k);
    const tau = Math.exp((-4 * Math.PI * k * thicknessNm) / LAMBDA0_NM);
    const slab: StackSpec = { incident: AIR, layers: [], substrate: constant(n, k), back: 'incoherent', substrateThicknessNm: thicknessNm };
    const got = solve(slab, LAMBDA0_NM, 0, 's');
    const denominator = 1 - r1 * r1 * tau * tau;
    expect(Math.abs(got.R - (r1 + ((1 - r1) ** 2 * r1 * tau * tau) / denominator))).toBeLessThan(EXACT);
    expect(Math.abs(got.T - ((1 - r1) ** 2 * tau) / denominator)).toBeLessThan(EXACT);
    expect(got.A).toBeGreaterThan(0.15); // most of the 1 − τ ≈ 0.2 is absorbed: the bulk really absorbs
    expect(Math.abs(got.aLayers)).toBeLessThan(EXACT);
  });
});

describe('absorbing bulk at normal incidence', () => {
  it('metal n = 0.958, k = 6.69: R = ((n − 1)² + k²)/((n + 1)² + k²), r = (1 − N)/(1 + N) with N = n − ik', () => {
    // Born & Wolf §14.2 (reflection at a metal, normal incidence); Macleod ch. 2 for N = n − ik.
    // In our convention r = (1 − n + ik)/(1 + n − ik), so Re r = (1 − n² − k²)/D and Im r = +2k/D with
    // D = (1 + n)² + k²: the imaginary part is positive (with N = n + ik it would be negative).
    const n = 0.958;
    const k = 6.69;
    const d = (1 + n) ** 2 + k * k;
    const metal = coated(constant(n, k), []);
    for (const pol of ['s', 'p'] as const) {
      const got = solve(metal, LAMBDA0_NM, 0, pol);
      expect(Math.abs(got.R - ((n - 1) ** 2 + k * k) / d)).toBeLessThan(EXACT);
      expect(Math.abs(got.T - (4 * n) / d)).toBeLessThan(EXACT); // flux entering the metal = 1 − R
      expect(Math.abs(got.A)).toBeLessThan(EXACT); // no layers, semi-infinite: nothing absorbed in layers
      expect(Math.abs(got.rRe - (1 - n * n - k * k) / d)).toBeLessThan(EXACT);
      expect(Math.abs(got.rIm - (2 * k) / d)).toBeLessThan(EXACT);
    }
  });
});

describe('absorbing and evanescent layers', () => {
  it('an opaque metal layer (300 nm, n = 0.958, k = 6.69) reflects as the bulk metal', () => {
    // Born & Wolf §14.2 for the bulk value; the layer passes e^(−4πkd/λ) ≈ 1e-20 of the flux back and
    // forth, far below the tolerance, so the substrate under it cannot show.
    const n = 0.958;
    const k = 6.69;
    const d = (1 + n) ** 2 + k * k;
    const got = solve(coated(constant(1.52), [{ dispersion: constant(n, k), thicknessNm: 300 }]), LAMBDA0_NM, 0, 's');
    expect(Math.abs(got.R - ((n - 1) ** 2 + k * k) / d)).toBeLessThan(EXACT);
    expect(Math.abs(got.rRe - (1 - n * n - k * k) / d)).toBeLessThan(EXACT);
    expect(Math.abs(got.rIm - (2 * k) / d)).toBeLessThan(EXACT);
    expect(got.T).toBeLessThan(EXACT);
    expect(Math.abs(got.A - (4 * n) / d)).toBeLessThan(EXACT); // all that enters is absorbed in the layer
  });

  it('frustrated total reflection across an air gap between two glasses (s and p)', () => {
    // A lossless film between identical media transmits 1/T = 1 + ¼(η1/η0 − η0/η1)² sin²δ (single-film
    // formula, Born & Wolf §1.6.4; Macleod ch. 2). Beyond the critical angle the gap's admittance is
    // imaginary and δ = −iβ, β = 2π b d/λ with b = √(n_g² sin²θ − 1), so with ρ = |η1|/η0
    // 1/T = 1 + ¼(ρ + 1/ρ)² sinh²β (derived; the frustrated-TIR result reviewed by Zhu, Yu, Hawley and
    // Roy, Am. J. Phys. 54, 601 (1986); from memory). s: η0 = n_g cos θ, |η1| = b; p: η0 = n_g/cos θ,
    // |η1| = 1/b.
    const nGlass = 1.52;
    for (const angleDeg of [45, 60, 80]) {
      const t = angleDeg * DEG;
      const b = Math.sqrt((nGlass * Math.sin(t)) ** 2 - 1);
      for (const gapNm of [20, 100, 300]) {
        const beta = ((2 * Math.PI) / LAMBDA0_NM) * b * gapNm;
        const stack = coated(constant(nGlass), [{ dispersion: AIR, thicknessNm: gapNm }], constant(nGlass));
        for (const [pol, rho] of [['s', b / (nGlass * Math.cos(t))], ['p', 1 / (b * (nGlass / Math.cos(t)))]] as const) {
          const expectedT = 1 / (1 + 0.25 * (rho + 1 / rho) ** 2 * Math.sinh(beta) ** 2);
          const got = solve(stack, LAMBDA0_NM, angleDeg, pol);
          expect(Math.abs(got.T - expectedT)).toBeLessThan(EXACT);
          expect(Math.abs(got.R - (1 - expectedT))).toBeLessThan(EXACT);
        }
      }
    }
  });

  it('any single film, absorbing or evanescent, at any angle: the Airy sum of multiple reflections', () => {
    // r = (r01 + r12 e^(−2iδ))/(1 + r01 r12 e^(−2iδ)), t = t01 t12 e^(−iδ)/(1 + r01 r12 e^(−2iδ)) with
    // δ = 2π q1 d/λ, r_ij = (η_i − η_j)/(η_i + η_j), t_ij = 2η_i/(η_i + η_j) on tangential fields and
    // T = Re(η_s)|t|²/η0 (Born & Wolf §1.6.4 and §14.4.1 for absorbing films; Macleod ch. 2 for the
    // admittances). Born & Wolf write e^(+2iβ) for exp(−iωt); our exp(+iωt) conjugates it to e^(−2iδ),
    // and with Im q1 < 0 its modulus e^(2 Im δ) < 1 decays as it must. An independent evaluation of a
    // one-layer stack: no characteristic matrix involved.
    const dbl = (min: number, max: number): fc.Arbitrary<number> => fc.double({ min, max, noNaN: true });
    const film = fc.record({
      n: dbl(0.1, 3),
      k: fc.oneof(fc.constant(0), dbl(0, 0.05), dbl(0.5, 7)),
      thicknessNm: dbl(0, 400),
    });
    const setting = fc.record({
      n0: fc.oneof(fc.constant(1), dbl(1, 1.8)),
      substrate: fc.record({ n: dbl(1.3, 2.5), k: fc.oneof(fc.constant(0), dbl(0, 0.05)) }),
      wavelengthNm: dbl(350, 1100),
      angleDeg: dbl(0, 85),
      pol: fc.constantFrom('s' as const, 'p' as const),
    });
    fc.assert(
      fc.property(film, setting, (f, c) => {
        const s0 = c.n0 * Math.sin(c.angleDeg * DEG);
        const eta0 = admittance(cx(c.n0, 0), s0, c.pol);
        const eta1 = admittance(cx(f.n, -f.k), s0, c.pol);
        const etaS = admittance(cx(c.substrate.n, -c.substrate.k), s0, c.pol);
        const delta = scale(normalQ(cx(f.n, -f.k), s0), (2 * Math.PI * f.thicknessNm) / c.wavelengthNm);
        const r01 = div(sub(eta0, eta1), add(eta0, eta1));
        const r12 = div(sub(eta1, etaS), add(eta1, etaS));
        const t01 = div(scale(eta0, 2), add(eta0, eta1));
        const t12 = div(scale(eta1, 2), add(eta1, etaS));
        const roundTrip = cexp(mul(cx(0, -2), delta));
        const denominator = add(cx(1, 0), mul(mul(r01, r12), roundTrip));
        const r = div(add(r01, mul(r12, roundTrip)), denominator);
        const t = div(mul(mul(t01, t12), cexp(mul(cx(0, -1), delta))), denominator);
        const expectedT = (etaS.re * (t.re * t.re + t.im * t.im)) / eta0.re;
        const got = solve(coated(constant(c.substrate.n, c.substrate.k), [{ dispersion: constant(f.n, f.k), thicknessNm: f.thicknessNm }], constant(c.n0)), c.wavelengthNm, c.angleDeg, c.pol);
        expect(Math.abs(got.rRe - r.re)).toBeLessThan(EXACT);
        expect(Math.abs(got.rIm - r.im)).toBeLessThan(EXACT);
        expect(Math.abs(got.T - expectedT)).toBeLessThan(EXACT);
        expect(Math.abs(got.A - (1 - (r.re * r.re + r.im * r.im) - expectedT))).toBeLessThan(EXACT);
      }),
      { numRuns: 300, interruptAfterTimeLimit: 10_000, markInterruptAsFailure: true },
    );
  });
});

// Complex arithmetic for the Airy sum (kept apart from the kernel's own on purpose).
interface Complex { re: number; im: number }
const cx = (re: number, im: number): Complex => ({ re, im });
const add = (a: Complex, b: Complex): Complex => cx(a.re + b.re, a.im + b.im);
const sub = (a: Complex, b: Complex): Complex => cx(a.re - b.re, a.im - b.im);
const scale = (a: Complex, f: number): Complex => cx(a.re * f, a.im * f);
const mul = (a: Complex, b: Complex): Complex => cx(a.re * b.re - a.im * b.im, a.re * b.im + a.im * b.re);
function div(a: Complex, b: Complex): Complex {
  const m = b.re * b.re + b.im * b.im;
  return cx((a.re * b.re + a.im * b.im) / m, (a.im * b.re - a.re * b.im) / m);
}
const cexp = (a: Complex): Complex => scale(cx(Math.cos(a.im), Math.sin(a.im)), Math.exp(a.re));
/** q = N cos θ = √(N² − s0²), the branch that decays away from the interface under exp(+iωt): Im q ≤ 0. */
function normalQ(index: Complex, s0: number): Complex {
  const a = sub(mul(index, index), cx(s0 * s0, 0));
  // Principal root computed without cancellation (the smaller part from a.im/2·larger part; e.g.
  // Press et al., Numerical Recipes, §5.4), then the decaying (or, lossless, forward) branch.
  const modulus = Math.hypot(a.re, a.im);
  let root: Complex;
  if (a.re >= 0) {
    const re = Math.sqrt((modulus + a.re) / 2);
    root = cx(re, re === 0 ? 0 : a.im / (2 * re));
  } else {
    const im = (a.im < 0 ? -1 : 1) * Math.sqrt((modulus - a.re) / 2);
    root = cx(a.im / (2 * im), im);
  }
  return root.im > 0 || (root.im === 0 && root.re < 0) ? scale(root, -1) : root;
}
/** Tilted admittance (Macleod ch. 2): η_s = q, η_p = N²/q. */
function admittance(index: Complex, s0: number, pol: 's' | 'p'): Complex {
  const q = normalQ(index, s0);
  return pol === 's' ? q : div(mul(index, index), q);
}
