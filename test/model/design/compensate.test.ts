// Compensation: re-optimising the layers still to come after a thickness error.
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadDesign } from '../../../src/config/load-design.ts';
import { compensate } from '../../../src/model/design/compensate.ts';
import { scaledDispersion } from '../../../src/model/optics/dispersion.ts';

const edge = loadDesign(fileURLToPath(new URL('../../../config/designs/edge-longpass-visible.yaml', import.meta.url)));
const design = edge.stack;
const band = { fromNm: 450, toNm: 800, quantity: 'T' as const };

describe('compensate', () => {
  it('leaves a stack on its design alone', () => {
    const r = compensate(design, design.layers.map((l) => l.thicknessNm), 5, band);
    expect(r.rmsBefore).toBeLessThan(1e-12);
    r.thicknessNm.forEach((t, i) => expect(Math.abs(t - (design.layers[i]?.thicknessNm ?? 0))).toBeLessThan(1e-9));
  });

  it('recovers most of the spectrum after errors in the first layers, within its bounds', () => {
    // Layers 1–10 off by up to ±3 % (a fixed pattern); layers 11–27 free within ±10 %.
    const current = design.layers.map((l, i) => l.thicknessNm * (i < 10 ? 1 + 0.03 * Math.sin(7.3 * i) : 1));
    const r = compensate(design, current, 10, { ...band, boundsFraction: 0.1 });
    expect(r.rmsAfter).toBeLessThan(r.rmsBefore / 5);
    r.thicknessNm.forEach((t, i) => {
      const d = design.layers[i]?.thicknessNm ?? 0;
      if (i < 10) expect(t).toBe(current[i]);
      else {
        expect(t).toBeGreaterThanOrEqual(0.9 * d - 1e-9);
        expect(t).toBeLessThanOrEqual(1.1 * d + 1e-9);
      }
    });
    // Tighter bounds can do less.
    const tight = compensate(design, current, 10, { ...band, boundsFraction: 0.005 });
    expect(tight.rmsAfter).toBeGreaterThan(r.rmsAfter);
    expect(tight.rmsAfter).toBeLessThanOrEqual(tight.rmsBefore);
  });

  it('in the media the chamber deposits: indices 1.5 % high, the later layers re-optimised in them', () => {
    // The first 8 layers deposited at the design's optical thickness in media 1.5 % (TiO2) and
    // 1 % (SiO2) above the design's indices: physical thickness d/κ. The spectrum, computed in
    // those media, departs from the design's; re-optimising layers 9–27 in the same media (their
    // cut targets then κ·x) recovers most of it, which re-optimising in the design's media cannot.
    const kappa = (name: string): number => (name === 'TiO2' ? 1.015 : 1.01);
    const names = edge.layers.map((l) => l.materialName);
    const deposited = { ...design, layers: design.layers.map((l, i) => ({ ...l, dispersion: scaledDispersion(l.dispersion, kappa(names[i] as string), 0) })) };
    const current = design.layers.map((l, i) => l.thicknessNm / kappa(names[i] as string));
    const inMedia = compensate(design, current, 8, { ...band, deposited });
    expect(inMedia.rmsAfter).toBeLessThan(inMedia.rmsBefore / 3);
    // Blind to the media: it sees a stack on its design and changes nothing.
    const blind = compensate(design, design.layers.map((l) => l.thicknessNm), 8, band);
    expect(blind.rmsBefore).toBeLessThan(1e-12);
    expect(() => compensate(design, current, 8, { ...band, deposited: { ...deposited, layers: deposited.layers.slice(1) } })).toThrow(/design's layers/);
  });

  it('has nothing to do when every layer is fixed', () => {
    const current = design.layers.map((l) => l.thicknessNm * 1.01);
    const r = compensate(design, current, design.layers.length, band);
    expect(r.iterations).toBe(0);
    expect(r.rmsAfter).toBe(r.rmsBefore);
  });
});
