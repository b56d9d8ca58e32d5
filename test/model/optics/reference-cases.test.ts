// Every case of the shared reference set against the kernel.
// Source of the expected values: tmm 0.2.0 (S. Byrnes), shared/reference/tmm-cases.json,
// re-checked there with a 50-digit characteristic-matrix calculation.
import { existsSync, readFileSync } from 'node:fs';
import { describe, expect, it } from 'vitest';
import { buildOpticalModel, createOpticalResult, evaluate, type StackSpec } from '../../../src/model/optics/optical-model.ts';
import type { Dispersion } from '../../../src/model/optics/dispersion.ts';
import { loadTmmCases, referenceDir, sharedReferenceDir, type ReferenceCase } from '../../support/reference.ts';

const TOLERANCE = 1e-9; // the bound; the reference agrees with itself to ~3e-15

const constant = (n: number, k = 0): Dispersion => ({ model: 'constant', n, k });

function stackOf(c: ReferenceCase, thicknessOverride?: { index: number; nm: number }): StackSpec {
  // The reference lists layers from the incident side; fringe lists them in deposition order.
  const layers = c.layers
    .map((layer, i) => ({
      dispersion: constant(layer.n, layer.k),
      thicknessNm: thicknessOverride?.index === i ? thicknessOverride.nm : layer.thicknessNm,
    }))
    .reverse();
  const incoherent = c.substrateTreatment === 'incoherent-thick';
  return {
    incident: constant(c.incidentIndex),
    layers,
    substrate: constant(c.substrate.n, c.substrate.k),
    back: incoherent ? 'incoherent' : 'semi-infinite',
    ...(incoherent ? { substrateThicknessNm: c.substrateThicknessNm as number } : {}),
    ...(c.exitIndex ? { exit: constant(c.exitIndex.n, c.exitIndex.k) } : {}),
  };
}

const cases = loadTmmCases();

describe('reference cases (tmm 0.2.0, shared/reference/tmm-cases.json)', () => {
  it('holds all 66 cases', () => {
    expect(cases.length).toBe(66);
  });

  it.runIf(existsSync(`${sharedReferenceDir}tmm-cases.json`))('the copy in test/fixtures equals the shared file', () => {
    expect(readFileSync(`${referenceDir}tmm-cases.json`, 'utf8')).toBe(readFileSync(`${sharedReferenceDir}tmm-cases.json`, 'utf8'));
  });

  for (const c of cases.filter((x) => x.family !== 'monitoring-curve')) {
    it(`${c.id} ${c.family}: R, T, A and r agree to ${TOLERANCE}`, () => {
      const model = buildOpticalModel(stackOf(c), [c.wavelengthNm], c.angleDeg);
      const got = evaluate(createOpticalResult(), model, 0, c.polarization);
      const e = c.expected as Record<string, number>;
      expect(Math.abs(got.R - (e.R as number))).toBeLessThan(TOLERANCE);
      expect(Math.abs(got.T - (e.T as number))).toBeLessThan(TOLERANCE);
      expect(Math.abs(got.A - (e.A as number))).toBeLessThan(TOLERANCE);
      if (e.ALayers !== undefined) {
        expect(Math.abs(got.aLayers - e.ALayers)).toBeLessThan(TOLERANCE);
      }
      if (e.rRe !== undefined) {
        // tmm: N = n + ik and its own p sign; ours: N = n − ik, r_p = r_s at normal incidence.
        // So r_tmm = conj(r) for s and −conj(r) for p.
        const sign = c.polarization === 'p' ? -1 : 1;
        expect(Math.abs(sign * got.rRe - (e.rRe))).toBeLessThan(TOLERANCE);
        expect(Math.abs(-sign * got.rIm - (e.rIm as number))).toBeLessThan(TOLERANCE);
      }
    });
  }

  for (const c of cases.filter((x) => x.family === 'monitoring-curve')) {
    it(`${c.id}: the monitoring curve agrees point by point to ${TOLERANCE}`, () => {
      const e = c.expected as { thicknessNm: number[]; T: number[]; R: number[]; A: number[] };
      const sweep = c.sweepLayerIndex as number;
      for (let i = 0; i < e.thicknessNm.length; i++) {
        const model = buildOpticalModel(stackOf(c, { index: sweep, nm: e.thicknessNm[i] as number }), [c.wavelengthNm], c.angleDeg);
        const got = evaluate(createOpticalResult(), model, 0, c.polarization);
        expect(Math.abs(got.T - (e.T[i] as number))).toBeLessThan(TOLERANCE);
        expect(Math.abs(got.R - (e.R[i] as number))).toBeLessThan(TOLERANCE);
        expect(Math.abs(got.A - (e.A[i] as number))).toBeLessThan(TOLERANCE);
      }
    });
  }
});
