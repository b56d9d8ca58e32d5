// Tolerances: the schema's sentences for bad input, the margins against closed forms, the front
// face alone, and the binomial interval the study's yield is given with.
import { describe, expect, it } from 'vitest';
import { loadMaterialLibrary, resolveDesignData } from '../../../src/config/load-design.ts';
import { ConfigError } from '../../../src/config/validation.ts';
import { checkTolerances, frontFaceStack, marginOf, toleranceGrid, wilsonInterval, ToleranceSchema } from '../../../src/model/design/tolerances.ts';

const library = loadMaterialLibrary();
const base = {
  formatVersion: 1,
  name: 'one quarter-wave',
  substrate: { material: { n: 1.52 }, back: 'none' },
  referenceWavelengthNm: 550,
  layers: [{ material: { n: 1.38 }, quarterWaves: 1 }],
};

function refusal(tolerances: unknown, design: object = base): string {
  try {
    resolveDesignData({ ...design, tolerances }, library, 'd.yaml');
  } catch (error) {
    if (error instanceof ConfigError) return error.message;
    throw error;
  }
  throw new Error('the design was accepted');
}

describe('tolerances in a design', () => {
  it('refuses bad tolerances with the path and a sentence saying what is wrong', () => {
    expect(refusal([{ fromNm: 500, toNm: 600, quantity: 'R' }])).toMatch(/tolerances\[0\]: a tolerance needs atLeastPercent, atMostPercent or both/);
    expect(refusal([{ fromNm: 600, toNm: 500, quantity: 'R', atMostPercent: 1 }])).toMatch(/tolerances\[0\]\.toNm: fromNm must not lie above toNm/);
    expect(refusal([{ fromNm: 500, toNm: 600, quantity: 'R', atLeastPercent: 5, atMostPercent: 1 }])).toMatch(/atLeastPercent must not lie above atMostPercent/);
    expect(refusal([{ fromNm: 500, toNm: 600, quantity: 'A', atMostPercent: 1 }])).toMatch(/tolerances\[0\]\.quantity: expected one of "T", "R"/);
    expect(refusal([{ fromNm: 500, toNm: 600, quantity: 'R', atMostPercent: 120 }])).toMatch(/tolerances\[0\]\.atMostPercent/);
    expect(refusal([{ fromNm: 500, toNm: 600, quantity: 'R', atMostPercent: 1, polarisation: 's' }])).toMatch(/unknown key "polarisation"/);
    expect(refusal({ fromNm: 500 })).toMatch(/tolerances: expected array/);
    // Outside a library material's data the spectrum cannot be judged.
    const glass = { ...base, substrate: { material: 'N-BK7' }, layers: [{ material: 'SiO2', thicknessNm: 100 }] };
    expect(refusal([{ fromNm: 300, toNm: 600, quantity: 'T', atLeastPercent: 90 }], glass)).toMatch(/tolerances\[0\]: 300–600 nm reaches outside the data of/);
  });

  it('accepts a design without tolerances, and fills the defaults of one', () => {
    expect(resolveDesignData(base, library, 'd.yaml').tolerances).toEqual([]);
    const t = ToleranceSchema.parse({ fromNm: 500, toNm: 600, quantity: 'T', atLeastPercent: 90 });
    expect(t).toEqual({ fromNm: 500, toNm: 600, quantity: 'T', atLeastPercent: 90, angleDeg: 0, pol: 'mean', face: 'part' });
  });

  it('measures margins in percentage points, positive inside, at the worst wavelength', () => {
    const t = ToleranceSchema.parse({ fromNm: 500, toNm: 520, quantity: 'T', atLeastPercent: 90, atMostPercent: 99 });
    const r = marginOf(t, [500, 510, 520], [0.95, 0.98, 0.905]);
    expect(r.worstMarginPp).toBeCloseTo(0.5, 12);
    expect(r.worstAtNm).toBe(520);
    expect(r.pass).toBe(true);
    const over = marginOf(t, [500, 510], [0.95, 0.995]);
    expect(over.worstMarginPp).toBeCloseTo(-0.5, 12);
    expect(over.pass).toBe(false);
    // A singular value never passes.
    expect(marginOf(t, [500, 510], [0.95, Number.NaN]).pass).toBe(false);
  });

  it('judges a quarter-wave against its closed form', () => {
    // R = ((n0·ns − n1²)/(n0·ns + n1²))² = 1.2601 % for n1 = 1.38 on ns = 1.52 at 550 nm (Macleod,
    // Thin-Film Optical Filters; the same check value as fringe spectrum's test).
    const design = resolveDesignData(base, library, 'd.yaml');
    const at = (atMostPercent: number): ReturnType<typeof checkTolerances> =>
      checkTolerances(design.stack, [ToleranceSchema.parse({ fromNm: 550, toNm: 550, quantity: 'R', atMostPercent })]);
    expect(at(1.3).pass).toBe(true);
    expect(at(1.3).worstMarginPp).toBeCloseTo(1.3 - 1.260079021463029, 9);
    expect(at(1.2).pass).toBe(false);
    expect(at(1.2).worstMarginPp).toBeCloseTo(1.2 - 1.260079021463029, 9);
    // The quarter-wave is a minimum of R: over 500–600 nm the worst R lies at an end.
    const wide = checkTolerances(design.stack, [ToleranceSchema.parse({ fromNm: 500, toNm: 600, quantity: 'R', atMostPercent: 5 })]);
    expect([500, 600]).toContain(wide.results[0]?.worstAtNm);
  });

  it('sees the coated face alone when asked: bare glass reflects R_f on its front and 2R_f/(1+R_f) as a part', () => {
    // Fresnel at normal incidence, R_f = ((1.52 − 1)/(1.52 + 1))² = 4.2580 %; both faces summed
    // incoherently give 2R_f/(1 + R_f) = 8.1683 % (derived, Macleod ch. 2).
    const glass = resolveDesignData({ ...base, substrate: { material: { n: 1.52 }, back: 'incoherent' }, layers: [{ material: { n: 1.52 }, thicknessNm: 1 }] }, library, 'd.yaml');
    const rf = ((1.52 - 1) / 2.52) ** 2;
    const tol = (face: 'part' | 'front'): ReturnType<typeof checkTolerances> =>
      checkTolerances(glass.stack, [ToleranceSchema.parse({ fromNm: 550, toNm: 550, quantity: 'R', atMostPercent: 10, face })]);
    expect(tol('front').results[0]?.valuePercent).toBeCloseTo(100 * rf, 9);
    expect(tol('part').results[0]?.valuePercent).toBeCloseTo((100 * 2 * rf) / (1 + rf), 9);
    expect(frontFaceStack(glass.stack)).not.toHaveProperty('substrateThicknessNm');
  });

  it('covers the range in 1 nm steps with both ends, or the one wavelength given', () => {
    expect(Array.from(toleranceGrid({ fromNm: 500, toNm: 503 }))).toEqual([500, 501, 502, 503]);
    expect(Array.from(toleranceGrid({ fromNm: 500, toNm: 500.5 }))).toEqual([500, 500.5]);
    expect(Array.from(toleranceGrid({ fromNm: 1064, toNm: 1064 }))).toEqual([1064]);
  });
});

describe('the Wilson score interval', () => {
  it('matches published intervals', () => {
    // R. G. Newcombe, "Two-sided confidence intervals for the single proportion", Stat. Med. 17
    // (1998) 857–872, Table II, method 3 (score, no continuity correction), from memory:
    // 81/263 → 0.2553–0.3662; 0/20 → 0–0.1611.
    const a = wilsonInterval(81, 263);
    expect(a.low).toBeCloseTo(0.2553, 4);
    expect(a.high).toBeCloseTo(0.3662, 4);
    const b = wilsonInterval(0, 20);
    expect(b.low).toBe(0);
    expect(b.high).toBeCloseTo(0.1611, 4);
    // All successes mirror none (derived: the interval is symmetric under k → n − k).
    const c = wilsonInterval(20, 20);
    expect(c.high).toBe(1);
    expect(c.low).toBeCloseTo(1 - 0.1611, 4);
    expect(Number.isNaN(wilsonInterval(0, 0).low)).toBe(true);
  });
});
