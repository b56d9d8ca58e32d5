// The optical monitor's view of a witness chip: monitoring curves against the shared reference
// set, turning points against closed forms and against the reference curves' own extrema, and
// the monitor's pass band.
import { describe, expect, it } from 'vitest';
import {
  buildChipMonitor,
  findTurningPoints,
  passBand,
  type ChipMonitor,
  type ChipMonitorSpec,
} from '../../../src/model/plan/chip-monitor.ts';
import type { Dispersion } from '../../../src/model/optics/dispersion.ts';
import { loadTmmCases, type ReferenceCase } from '../../support/reference.ts';

const constant = (n: number, k = 0): Dispersion => ({ model: 'constant', n, k });

/** A monitor on a bare 1 mm n = 1.52 chip with an incoherent back face, air incident. */
function bareChip(n: number, wavelengthNm: number, bandwidthNm = 0, extra: Partial<ChipMonitorSpec> = {}): ChipMonitor {
  return buildChipMonitor({
    incident: constant(1),
    substrate: constant(1.52),
    back: 'incoherent',
    substrateThicknessNm: 1e6,
    below: [],
    growing: constant(n),
    wavelengthNm,
    bandwidthNm,
    angleDeg: 0,
    signal: 'transmission',
    ...extra,
  });
}

/** The chip of a `monitoring-curve` reference case: layers[0] grows, the rest lie below (reversed to deposition order). */
function caseMonitor(c: ReferenceCase, signal: 'transmission' | 'reflection' = 'transmission'): ChipMonitor {
  const [growing, ...rest] = c.layers;
  if (!growing) throw new Error(`${c.id} has no layers`);
  return buildChipMonitor({
    incident: constant(c.incidentIndex),
    substrate: constant(c.substrate.n, c.substrate.k),
    back: 'incoherent',
    substrateThicknessNm: c.substrateThicknessNm as number,
    below: rest.map((l) => ({ dispersion: constant(l.n, l.k), thicknessNm: l.thicknessNm })).reverse(),
    growing: constant(growing.n, growing.k),
    wavelengthNm: c.wavelengthNm,
    bandwidthNm: 0,
    angleDeg: c.angleDeg,
    signal,
  });
}

function sample(monitor: ChipMonitor, stepNm: number, count: number): Float64Array {
  return Float64Array.from({ length: count }, (_, i) => monitor.signalAt(i * stepNm));
}

// ---------------------------------------------------------------------------------------------
// A small least-squares polynomial fit (Householder QR of the Vandermonde matrix) and the
// stationary point of the fitted polynomial (Newton on p′). Used to locate the extremum of a
// reference curve given only at its 50 tabulated points.

function polyfit(x: readonly number[], y: readonly number[], degree: number): number[] {
  const m = x.length;
  const n = degree + 1;
  const a: number[][] = x.map((xi) => Array.from({ length: n }, (_, j) => xi ** j));
  const b = [...y];
  for (let k = 0; k < n; k++) {
    let norm = 0;
    for (let i = k; i < m; i++) norm += a[i]![k]! ** 2;
    norm = Math.sqrt(norm);
    const alpha = a[k]![k]! > 0 ? -norm : norm;
    const v = new Array<number>(m).fill(0);
    for (let i = k; i < m; i++) v[i] = a[i]![k]!;
    v[k] = v[k]! - alpha;
    let vv = 0;
    for (let i = k; i < m; i++) vv += v[i]! ** 2;
    if (vv === 0) continue;
    for (let j = k; j < n; j++) {
      let s = 0;
      for (let i = k; i < m; i++) s += v[i]! * a[i]![j]!;
      const f = (2 * s) / vv;
      for (let i = k; i < m; i++) a[i]![j] = a[i]![j]! - f * v[i]!;
    }
    let s = 0;
    for (let i = k; i < m; i++) s += v[i]! * b[i]!;
    const f = (2 * s) / vv;
    for (let i = k; i < m; i++) b[i] = b[i]! - f * v[i]!;
  }
  const c = new Array<number>(n).fill(0);
  for (let i = n - 1; i >= 0; i--) {
    let s = b[i]!;
    for (let j = i + 1; j < n; j++) s -= a[i]![j]! * c[j]!;
    c[i] = s / a[i]![i]!;
  }
  return c;
}

/** Root of p′ near `u0` for p(u) = Σ c_j u^j. */
function stationaryPoint(c: readonly number[], u0: number): number {
  let u = u0;
  for (let it = 0; it < 100; it++) {
    let d1 = 0;
    let d2 = 0;
    for (let j = 1; j < c.length; j++) d1 += j * c[j]! * u ** (j - 1);
    for (let j = 2; j < c.length; j++) d2 += j * (j - 1) * c[j]! * u ** (j - 2);
    const step = d1 / d2;
    u -= step;
    if (Math.abs(step) < 1e-15) break;
  }
  return u;
}

/**
 * The extremum of a tabulated curve near its sampled extremum `index`: a degree-6 least-squares
 * polynomial through the 9 points around it (shifted to stay inside the table), abscissa scaled
 * to [−1, 1] for conditioning.
 */
function tabulatedExtremum(xs: readonly number[], ys: readonly number[], index: number, points = 9, degree = 6): number {
  const half = Math.floor(points / 2);
  const first = Math.min(Math.max(0, index - half), xs.length - points);
  const wx = xs.slice(first, first + points);
  const wy = ys.slice(first, first + points);
  const centre = (wx[0]! + wx[wx.length - 1]!) / 2;
  const scale = (wx[wx.length - 1]! - wx[0]!) / 2;
  const c = polyfit(wx.map((x) => (x - centre) / scale), wy, degree);
  return centre + scale * stationaryPoint(c, (xs[index]! - centre) / scale);
}

/** Indices of interior sample extrema of a table (strict on one side). */
function sampledExtrema(ys: readonly number[]): number[] {
  const out: number[] = [];
  for (let i = 1; i + 1 < ys.length; i++) {
    const a = ys[i - 1]!;
    const b = ys[i]!;
    const c = ys[i + 1]!;
    if ((b > a && b >= c) || (b < a && b <= c)) out.push(i);
  }
  return out;
}

const cases = loadTmmCases();
const curveCases = cases.filter((c) => c.family === 'monitoring-curve');

describe('buildChipMonitor against the reference monitoring curves (tmm 0.2.0, shared/reference/tmm-cases.json)', () => {
  it('the reference set holds the five monitoring curves', () => {
    expect(curveCases.map((c) => c.id)).toEqual(['S-monitor-01', 'S-monitor-02', 'S-monitor-03', 'S-monitor-04', 'S-monitor-05']);
  });

  for (const c of curveCases) {
    it(`${c.id}: T and R at every tabulated thickness agree to 1e-9`, () => {
      // Source: tmm 0.2.0 (S. Byrnes), shared/reference/tmm-cases.json
      const e = c.expected as { thicknessNm: number[]; T: number[]; R: number[] };
      const t = caseMonitor(c, 'transmission');
      const r = caseMonitor(c, 'reflection');
      expect(e.thicknessNm).toHaveLength(50);
      e.thicknessNm.forEach((d, i) => {
        expect(Math.abs(t.signalAt(d) - e.T[i]!), `${c.id} T at ${d} nm`).toBeLessThan(1e-9);
        expect(Math.abs(r.signalAt(d) - e.R[i]!), `${c.id} R at ${d} nm`).toBeLessThan(1e-9);
      });
    });
  }
});

describe('turning points of a quarter-wave layer on a bare chip', () => {
  // Closed form (case S-monitor-01 closedForm "turningPoint.T"; Macleod, Thin-Film Optical Filters;
  // incoherent sum in a thick slab): a quarter-wave of n₁ on n_s has front reflectance
  // R_f = ((n_s − n₁²)/(n_s + n₁²))², the back face R_b = ((n_s − 1)/(n_s + 1))², and
  // T = (1 − R_f)(1 − R_b)/(1 − R_f R_b). A half-wave is absent: T = 2n_s/(n_s² + 1) (bare slab).
  const ns = 1.52;
  const closedQuarterWaveT = (n1: number): number => {
    const rf = ((ns - n1 * n1) / (ns + n1 * n1)) ** 2;
    const rb = ((ns - 1) / (ns + 1)) ** 2;
    return ((1 - rf) * (1 - rb)) / (1 - rf * rb);
  };
  const bareT = (2 * ns) / (ns * ns + 1);
  const s01 = cases.find((c) => c.id === 'S-monitor-01') as ReferenceCase & {
    closedForm: { quantity: string; value: number }[];
  };

  it('the closed form in the test matches the value the reference case gives (S-monitor-01)', () => {
    const tp = s01.closedForm.find((f) => f.quantity === 'turningPoint.T');
    const t0 = s01.closedForm.find((f) => f.quantity === 'T[0]');
    expect(Math.abs(closedQuarterWaveT(2.35) - (tp?.value as number))).toBeLessThan(1e-12);
    expect(Math.abs(bareT - (t0?.value as number))).toBeLessThan(1e-12);
  });

  for (const [name, n, kind] of [
    ['H', 2.35, 'minimum'],
    ['L', 1.46, 'maximum'],
  ] as const) {
    for (const wavelengthNm of [450, 550, 632.8, 1064]) {
      it(`${name} (n = ${n}) at ${wavelengthNm} nm turns at λ/4n and λ/2n to 1e-6 nm`, () => {
        const monitor = bareChip(n, wavelengthNm);
        const quarterWaveNm = wavelengthNm / (4 * n);
        // A step that does not divide the quarter-wave, so no sample sits on a turning point.
        const stepNm = quarterWaveNm / 37.3;
        const tps = findTurningPoints(monitor, sample(monitor, stepNm, Math.ceil((2.3 * quarterWaveNm) / stepNm)), stepNm);
        expect(tps).toHaveLength(2);
        const [first, second] = tps as [(typeof tps)[number], (typeof tps)[number]];
        expect(Math.abs(first.thicknessNm - quarterWaveNm)).toBeLessThan(1e-6);
        expect(first.kind).toBe(kind);
        expect(Math.abs(first.signal - closedQuarterWaveT(n))).toBeLessThan(1e-12);
        if (n === 2.35) {
          const tpClosed = s01.closedForm.find((f) => f.quantity === 'turningPoint.T')?.value as number;
          expect(Math.abs(first.signal - tpClosed)).toBeLessThan(1e-12);
        }
        expect(Math.abs(second.thicknessNm - 2 * quarterWaveNm)).toBeLessThan(1e-6);
        expect(Math.abs(second.signal - bareT)).toBeLessThan(1e-12);
      });
    }
  }
});

describe('the extremum finder used on the reference tables', () => {
  // Checked on sinusoids tabulated like S-monitor-04 (50 points over two quarter-waves of
  // n = 1.46 at 632.8 nm), whose extremum is known in closed form.
  const n = 1.46;
  const wavelengthNm = 632.8;
  const k = (4 * Math.PI * n) / wavelengthNm; // signal phase per nm: 2δ = 4πnd/λ
  const xs = Array.from({ length: 50 }, (_, i) => (i * (2 * wavelengthNm)) / (4 * n) / 49);

  for (const [label, peakNm, slope] of [
    ['pure, mid-table', 97.3, 0],
    ['tilted, mid-table', 97.3, 1e-4],
    ['tilted, near the end of the table', 210.1, -2e-4],
  ] as const) {
    it(`finds the maximum of a ${label} sinusoid to 1e-4 nm`, () => {
      const ys = xs.map((x) => 0.8 + 0.1 * Math.cos(k * (x - peakNm)) + slope * x);
      // f′ = −0.1k sin(k(x − peak)) + s = 0 → x = peak + asin(s/(0.1k))/k
      const exact = peakNm + Math.asin(slope / (0.1 * k)) / k;
      const index = sampledExtrema(ys).find((i) => Math.abs(xs[i]! - exact) < xs[1]!) as number;
      expect(index).toBeDefined();
      expect(Math.abs(tabulatedExtremum(xs, ys, index) - exact)).toBeLessThan(1e-4);
    });
  }
});

describe('turning points on chips carrying non-quarter-wave layers', () => {
  for (const id of ['S-monitor-04', 'S-monitor-05']) {
    it(`${id}: the turning points are far from the quarter-waves and on the reference curve's extrema to 0.01 nm`, () => {
      const c = cases.find((x) => x.id === id) as ReferenceCase;
      const e = c.expected as { thicknessNm: number[]; T: number[] };
      const quarterWaveNm = c.quarterWaveNm as number;
      const monitor = caseMonitor(c);
      const stepNm = quarterWaveNm / 100;
      const tps = findTurningPoints(monitor, sample(monitor, stepNm, 201), stepNm);
      const reference = sampledExtrema(e.T).map((i) => tabulatedExtremum(e.thicknessNm, e.T, i));
      // Both tables hold one maximum and one minimum over 0–2 QW (tmm-cases.json).
      expect(reference).toHaveLength(2);
      expect(tps).toHaveLength(2);
      tps.forEach((tp, j) => {
        // On a complex admittance the extrema move off the quarter-waves (Macleod, production
        // methods): here by about 9.9 nm (S-monitor-04) and 38 nm or more (S-monitor-05).
        const offQuarterWave = Math.abs(tp.thicknessNm - quarterWaveNm * Math.round(tp.thicknessNm / quarterWaveNm));
        expect(offQuarterWave, `${id} turning point ${j + 1}`).toBeGreaterThan(5);
        expect(Math.abs(tp.thicknessNm - reference[j]!), `${id} turning point ${j + 1}`).toBeLessThan(0.01);
      });
    });
  }
});

describe('pass-band averaging', () => {
  /** max − min of the signal over 0 … 2 QW, with the interior extrema located exactly. */
  function swingAndTurn(n: number, wavelengthNm: number, bandwidthNm: number): { swing: number; turnNm: number } {
    const monitor = bareChip(n, wavelengthNm, bandwidthNm);
    const quarterWaveNm = wavelengthNm / (4 * n);
    const stepNm = (2 * quarterWaveNm) / 200;
    const samples = sample(monitor, stepNm, 201);
    const tps = findTurningPoints(monitor, samples, stepNm);
    const values = [...samples, ...tps.map((tp) => tp.signal)];
    const turn = tps.find((tp) => Math.abs(tp.thicknessNm - quarterWaveNm) < 0.1 * quarterWaveNm);
    return { swing: Math.max(...values) - Math.min(...values), turnNm: turn?.thicknessNm ?? Number.NaN };
  }

  for (const [n, wavelengthNm] of [
    [2.35, 550],
    [2.35, 1064],
    [1.46, 632.8],
    [1.46, 1064],
  ] as const) {
    it(`n = ${n} at ${wavelengthNm} nm: 2, 5, 10 nm bands shrink the swing in turn and keep the quarter-wave turn within 0.01 nm`, () => {
      const quarterWaveNm = wavelengthNm / (4 * n);
      const runs = [0, 2, 5, 10].map((bw) => swingAndTurn(n, wavelengthNm, bw));
      for (let i = 1; i < runs.length; i++) expect(runs[i]!.swing).toBeLessThan(runs[i - 1]!.swing);
      for (const r of runs) expect(Math.abs(r.turnNm - quarterWaveNm)).toBeLessThan(0.01);
    });
  }

  it('moves the turn by the second-order amount of the band (derived here), also where it exceeds 0.01 nm', () => {
    // Derived here: near the turn each sub-wavelength's curve is a parabola about λⱼ/4n with
    // curvature ∝ λⱼ⁻² (the signal depends on d only through δ = 2πnd/λ, constant n), so the
    // weighted sum turns at (1/4n) Σwⱼ/λⱼ / Σwⱼ/λⱼ² — below λ/4n by about σ_λ²/(2nλ).
    for (const [n, wavelengthNm] of [
      [2.35, 450],
      [2.35, 550],
      [1.46, 450],
      [1.46, 1064],
    ] as const) {
      const band = passBand(wavelengthNm, 10);
      let s1 = 0;
      let s2 = 0;
      band.weights.forEach((w, j) => {
        const l = band.wavelengthsNm[j]!;
        s1 += w / l;
        s2 += w / (l * l);
      });
      const predicted = s1 / s2 / (4 * n);
      const quarterWaveNm = wavelengthNm / (4 * n);
      const got = swingAndTurn(n, wavelengthNm, 10).turnNm;
      expect(predicted).toBeLessThan(quarterWaveNm);
      expect(Math.abs(got - quarterWaveNm - (predicted - quarterWaveNm)), `n = ${n} at ${wavelengthNm} nm`).toBeLessThan(
        0.01 * (quarterWaveNm - predicted),
      );
    }
  });
});

describe('passBand', () => {
  for (const [centreNm, fwhmNm] of [
    [550, 2],
    [632.8, 5],
    [1064, 10],
    [400, 0.3],
  ] as const) {
    it(`${fwhmNm} nm at ${centreNm} nm: weights sum to 1, are symmetric, and centre on ${centreNm} nm`, () => {
      const { wavelengthsNm, weights } = passBand(centreNm, fwhmNm);
      const count = weights.length;
      expect(wavelengthsNm).toHaveLength(count);
      expect(count).toBeGreaterThanOrEqual(3);
      let sum = 0;
      let mean = 0;
      for (let i = 0; i < count; i++) {
        const w = weights[i]!;
        expect(w).toBeGreaterThan(0);
        sum += w;
        mean += w * wavelengthsNm[i]!;
        const mirror = count - 1 - i;
        expect(Math.abs(w - weights[mirror]!)).toBeLessThan(1e-15);
        expect(Math.abs(wavelengthsNm[i]! - centreNm - (centreNm - wavelengthsNm[mirror]!))).toBeLessThan(1e-9);
      }
      expect(Math.abs(sum - 1)).toBeLessThan(1e-15);
      expect(Math.abs(mean - centreNm)).toBeLessThan(1e-9);
      // The nodes lie inside the triangle's base (±FWHM) and the weights fall away from the centre.
      for (let i = 0; i < count; i++) expect(Math.abs(wavelengthsNm[i]! - centreNm)).toBeLessThan(fwhmNm);
      const middle = (count - 1) / 2;
      for (let i = 1; i <= middle; i++) expect(weights[middle - i]!).toBeLessThan(weights[middle - i + 1]!);
    });
  }

  it('a zero band is the centre wavelength alone', () => {
    const { wavelengthsNm, weights } = passBand(550, 0);
    expect(Array.from(wavelengthsNm)).toEqual([550]);
    expect(Array.from(weights)).toEqual([1]);
  });

  it('a band averages the single-wavelength signals with its weights', () => {
    const band = passBand(700, 8);
    const averaged = bareChip(2.1, 700, 8);
    const d = 61.7;
    let expected = 0;
    band.weights.forEach((w, j) => {
      expected += w * bareChip(2.1, band.wavelengthsNm[j]!).signalAt(d);
    });
    expect(Math.abs(averaged.signalAt(d) - expected)).toBeLessThan(1e-14);
  });
});
