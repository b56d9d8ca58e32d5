// The virtual chamber's spectral monitor: the true chip's spectrum from the project's kernel, with
// the profile's noise, baseline drift and stray light, on a grid of its own.
import { describe, expect, it } from 'vitest';
import { buildOpticalModel, spectrum, type StackSpec } from '../../src/model/optics/optical-model.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import type { Reading, SpectrumReading } from '../../src/pipeline/types.ts';
import { createVirtualChamber, SimProfileSchema, type ChamberTruth } from '../../sim/index.ts';
import { formatSpectrum, formatSpectrumHeader } from '../../sim/line-format.ts';
import { createSpectrumDecoder, FRINGE_SPECTRUM_JSON, FRINGE_SPECTRUM_TABLE } from '../../drivers/spectrum-decoder.ts';
import { idealWith, profiles, recipes } from './support.ts';

const open = (source: string, layer: number, timeS: number) => ({ kind: 'shutter', action: 'open', source, layer, timeS }) as const;
const quiet = { noisePercent: 0, gainDriftPercentPerHour: 0, offsetDriftPercentPerHour: 0, strayLightPercent: 0, resolutionNm: 0 };
const ignore = (_r: Reading): void => undefined;

/**
 * The chip's spectrum the monitor watches, straight from the kernel (`spectrum` over the whole
 * stack, the project's Abelès kernel, itself checked against tmm 0.2.0 in test/model/optics): the
 * independent check of the chamber's precomputed-below path.
 */
function kernelSpectrum(recipe: ResolvedRecipe, truth: ChamberTruth, gridNm: Float64Array): Float64Array {
  const layer = recipe.layers[truth.monitor.layer - 1] as ResolvedRecipe['layers'][number];
  const chip = recipe.chips[truth.monitor.chip] as ResolvedRecipe['chips'][number];
  const stack: StackSpec = {
    incident: recipe.incident,
    substrate: chip.substrate,
    back: chip.back === 'incoherent' ? 'incoherent' : 'semi-infinite',
    substrateThicknessNm: chip.thicknessMm * 1e6,
    layers: truth.layers.filter((l) => l.chip === truth.monitor.chip).flatMap((l) => l.slices.map((s) => ({ dispersion: s.dispersion, thicknessNm: s.chipNm }))),
  };
  const model = buildOpticalModel(stack, gridNm, layer.angleDeg);
  const out = { R: new Float64Array(gridNm.length), T: new Float64Array(gridNm.length), A: new Float64Array(gridNm.length) };
  spectrum(out, model, layer.angleDeg === 0 ? 's' : 'mean');
  return layer.signal === 'transmission' ? out.T : out.R;
}

/** Runs the edge filter's first layers (two materials) to `untilS`, keeping every spectrum and the truth at each. */
function edgeRun(spectral: Record<string, unknown>, untilS: number, seed = 1): { spectra: SpectrumReading[]; truths: ChamberTruth[]; recipe: ResolvedRecipe } {
  const recipe = recipes.edge;
  const profile = SimProfileSchema.parse({ ...profiles.typical, spectral });
  const chamber = createVirtualChamber(recipe, profile, seed);
  const spectra: SpectrumReading[] = [];
  const truths: ChamberTruth[] = [];
  const l1 = recipe.layers[0] as ResolvedRecipe['layers'][number];
  const l2 = recipe.layers[1] as ResolvedRecipe['layers'][number];
  chamber.command(open(l1.materialName, 1, 1));
  // A second layer opening part-way: the spectrum must follow the chip's new top layer.
  chamber.command(open(l2.materialName, 2, (l1.targetNm / l1.rateNmPerS) * 0.8));
  for (let t = 0.1; t <= untilS + 1e-9; t += 0.1) {
    chamber.advance(t, ignore, (s) => {
      spectra.push(s);
      truths.push(chamber.truth());
    });
  }
  return { spectra, truths, recipe };
}

describe('the virtual chamber’s spectral monitor', () => {
  it('serves the kernel’s spectrum of the true chip as it grows (noise, drift, stray light and slit off), to 1e-12', () => {
    const { spectra, truths, recipe } = edgeRun({ ...quiet, rateHz: 2 }, 120);
    expect(spectra.length).toBeGreaterThan(200);
    const grid = spectra[0]?.wavelengthsNm as Float64Array;
    expect(grid.length).toBe(251);
    expect([grid[0], grid[250]]).toEqual([400, 900]);
    let worst = 0;
    const layersSeen = new Set<number>();
    spectra.forEach((s, i) => {
      const truth = truths[i] as ChamberTruth;
      layersSeen.add(truth.monitor.layer);
      expect(s.wavelengthsNm).toBe(grid);
      const expected = kernelSpectrum(recipe, truth, grid);
      for (let w = 0; w < grid.length; w++) worst = Math.max(worst, Math.abs((s.values[w] as number) - (expected[w] as number)));
    });
    expect(worst).toBeLessThanOrEqual(1e-12);
    expect([...layersSeen].sort()).toEqual([1, 2]);
    // The spectrum moved: the growing layers change it by far more than rounding.
    const first = spectra[0]?.values as Float64Array;
    const last = spectra.at(-1)?.values as Float64Array;
    expect(Math.max(...first.map((v, w) => Math.abs(v - (last[w] as number))))).toBeGreaterThan(0.01);
  });

  it('has the configured noise per wavelength, measured over many frames', () => {
    // Before any shutter opens the chip is fixed: the difference of two spectra is pure noise,
    // of variance 2σ² (derived: two independent draws).
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, SimProfileSchema.parse({ ...profiles.typical, spectral: { ...quiet, noisePercent: 0.2 } }), 11);
    const spectra: SpectrumReading[] = [];
    chamber.advance(60, ignore, (s) => spectra.push(s));
    expect(spectra).toHaveLength(301); // 5 a second, 0 … 60 s
    let sum = 0;
    let n = 0;
    for (let i = 1; i < spectra.length; i++) {
      const a = (spectra[i - 1] as SpectrumReading).values;
      const b = (spectra[i] as SpectrumReading).values;
      for (let w = 0; w < a.length; w++) {
        sum += ((b[w] as number) - (a[w] as number)) ** 2;
        n++;
      }
    }
    const rmsPercent = 100 * Math.sqrt(sum / n / 2);
    // 75,000 differences: the rms is good to 0.3 % (1/√(2N)); 3 % allows 10σ.
    expect(rmsPercent).toBeGreaterThan(0.2 * 0.97);
    expect(rmsPercent).toBeLessThan(0.2 * 1.03);
  });

  it('adds stray light and the baseline’s drift as the profile states', () => {
    const stray = 2;
    const { spectra, truths, recipe } = edgeRun({ ...quiet, rateHz: 1, strayLightPercent: stray, gainDriftPercentPerHour: 100, offsetDriftPercentPerHour: 36 }, 10);
    const s = spectra.at(-1) as SpectrumReading;
    const expected = kernelSpectrum(recipe, truths.at(-1) as ChamberTruth, s.wavelengthsNm);
    const t = s.timeS;
    const g = 1 + (1 / 3600) * t;
    const o = (0.36 / 3600) * t;
    const sFrac = stray / 100;
    for (let w = 0; w < expected.length; w++) {
      expect(s.values[w]).toBeCloseTo((g * ((expected[w] as number) + sFrac)) / (1 + sFrac) + o, 12);
    }
  });

  it('averages over its slit: the triangle’s mean of the kernel’s spectrum, to 1e-5', () => {
    // Derived: the reading is ∫ tri(x)·S(λ + x) dx / ∫ tri(x) dx for a triangular slit of FWHM w
    // (base ±w); here the integral by a 121-point rule against the chamber's 5 nodes.
    const w = 3;
    const { spectra, truths, recipe } = edgeRun({ ...quiet, rateHz: 1, resolutionNm: w }, 100);
    const s = spectra.at(-1) as SpectrumReading;
    const picked = [0, 50, 100, 150, 200, 250];
    const nodes = Array.from({ length: 121 }, (_, k) => -w + (k * 2 * w) / 120);
    const weights = nodes.map((x) => 1 - Math.abs(x) / w);
    const total = weights.reduce((a, b) => a + b, 0);
    const fine = Float64Array.from(picked.flatMap((i) => nodes.map((x) => (s.wavelengthsNm[i] as number) + x)));
    const values = kernelSpectrum(recipe, truths.at(-1) as ChamberTruth, fine);
    const sharp = kernelSpectrum(recipe, truths.at(-1) as ChamberTruth, s.wavelengthsNm);
    let moved = 0;
    picked.forEach((i, p) => {
      const mean = weights.reduce((acc, wt, k) => acc + wt * (values[p * nodes.length + k] as number), 0) / total;
      expect(Math.abs((s.values[i] as number) - mean), `at ${s.wavelengthsNm[i]} nm`).toBeLessThan(1e-5);
      moved = Math.max(moved, Math.abs((s.values[i] as number) - (sharp[i] as number)));
    });
    expect(moved).toBeGreaterThan(0); // the slit did average
  });

  it('leaves every other reading as it was, and is the same for the same seed', () => {
    const recipe = recipes.edge;
    const readings = (spectral: boolean): Reading[] => {
      const profile = spectral ? SimProfileSchema.parse({ ...profiles.typical, spectral: {} }) : profiles.typical;
      const chamber = createVirtualChamber(recipe, profile, 3);
      chamber.command(open((recipe.layers[0] as ResolvedRecipe['layers'][number]).materialName, 1, 0));
      const out: Reading[] = [];
      chamber.advance(30, (r) => out.push(r), spectral ? () => undefined : undefined);
      return out;
    };
    expect(readings(true)).toEqual(readings(false));
    const twice = [1, 2].map(() => edgeRun({}, 5, 9).spectra.map((s) => Array.from(s.values)));
    expect(twice[0]).toEqual(twice[1]);
  });

  it('refuses a grid the materials have no data for, before the run', () => {
    // The edge filter's media are tabulated or fitted over the visible; 100 nm is deep UV.
    expect(() => createVirtualChamber(recipes.edge, idealWith({ spectral: { grid: { fromNm: 100, toNm: 900, stepNm: 2 } } }), 1)).toThrow(/spectral monitor cannot see chip 1/);
  });

  it('writes its lines in both forms so that the spectral decoder reads them back to 6 decimals', () => {
    const { spectra } = edgeRun({ rateHz: 1 }, 3);
    for (const [form, options] of [
      ['table', FRINGE_SPECTRUM_TABLE],
      ['json', FRINGE_SPECTRUM_JSON],
    ] as const) {
      const decoder = createSpectrumDecoder(options);
      const s = spectra.at(-1) as SpectrumReading;
      expect(decoder.decode(formatSpectrumHeader(s.wavelengthsNm, form).trimEnd(), 0)).toBeNull();
      const line = formatSpectrum(s, form).trimEnd();
      const back = decoder.decode(line, 0) as SpectrumReading;
      expect(back.kind).toBe('spectrum');
      expect(back.timeS).toBeCloseTo(s.timeS, 3);
      s.values.forEach((v, w) => expect(Math.abs((back.values[w] as number) - v)).toBeLessThanOrEqual(5e-7 + 1e-15));
      expect(line.length).toBeLessThan(2600); // 251 values of 8–9 characters
    }
  });

  it('serves 5 spectra a second by default, at little cost each (one layer per sub-wavelength on the precomputed chip below)', () => {
    // The cost is printed for the record, not asserted: the machine is shared.
    const recipe = recipes.edge;
    const run = (spectra: boolean, resolutionNm: number): { ms: number; count: number } => {
      const chamber = createVirtualChamber(recipe, SimProfileSchema.parse({ ...profiles.typical, spectral: { resolutionNm } }), 1);
      chamber.command(open((recipe.layers[0] as ResolvedRecipe['layers'][number]).materialName, 1, 0));
      let count = 0;
      const start = performance.now();
      chamber.advance(200, ignore, spectra ? () => count++ : undefined);
      return { ms: performance.now() - start, count };
    };
    run(true, 3);
    for (const resolutionNm of [0, 3]) {
      const withSpectra = run(true, resolutionNm);
      expect(withSpectra.count).toBe(1001); // 0, 0.2, … 200 s
      const extraMs = withSpectra.ms - run(false, resolutionNm).ms;
      console.log(`spectral monitor: ${((extraMs * 1000) / withSpectra.count).toFixed(0)} µs per 251-wavelength spectrum (slit ${resolutionNm} nm)`);
    }
  });
});
