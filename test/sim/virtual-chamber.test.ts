// The virtual chamber: with every fault at zero it reproduces the project's own model of the
// true stack exactly; each fault knob shows up in the readings with the configured size (within
// sampling error, fixed seeds); a seed fixes the run byte for byte.
import { describe, expect, it } from 'vitest';
import { crystalLifeUsed, stackFrequencyHz, stackThicknessNm, type CrystalLayer } from '../../src/model/crystal/index.ts';
import { indexAt, type Dispersion } from '../../src/model/optics/dispersion.ts';
import { buildChipMonitor, passBand, type ChipMonitor } from '../../src/model/plan/chip-monitor.ts';
import { planRun } from '../../src/model/plan/plan.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import type { Reading } from '../../src/pipeline/types.ts';
import { createVirtualChamber, INHOMOGENEITY_SLICES, type ChamberTruth, type SimProfile, type VirtualChamber } from '../../sim/index.ts';
import { autocorrelation, idealWith, meanAndRms, profiles, recipes, runOracle } from './support.ts';

const open = (source: string, layer: number, timeS: number) => ({ kind: 'shutter', action: 'open', source, layer, timeS }) as const;
const close = (source: string, layer: number, timeS: number) => ({ kind: 'shutter', action: 'close', source, layer, timeS }) as const;

/** The signal the project's chip monitor predicts for the truth's stack now (built independently of the chamber). */
function expectedSignal(recipe: ResolvedRecipe, truth: ChamberTruth, cache: Map<string, ChipMonitor>): number {
  const layerNumber = truth.monitor.layer;
  const settings = recipe.layers[layerNumber - 1] as ResolvedRecipe['layers'][number];
  const top = truth.layers.find((l) => l.number === layerNumber);
  const mine = top?.slices ?? [{ dispersion: truth.materials[settings.materialName]?.dispersion as Dispersion, chipNm: 0 }];
  const key = `${layerNumber}/${top === undefined ? 0 : mine.length}`;
  let monitor = cache.get(key);
  if (monitor === undefined) {
    const below: { dispersion: Dispersion; thicknessNm: number }[] = [];
    for (const l of truth.layers) {
      if (l.number >= layerNumber || l.chip !== settings.chip) continue;
      for (const s of l.slices) below.push({ dispersion: s.dispersion, thicknessNm: s.chipNm });
    }
    for (const s of mine.slice(0, -1)) below.push({ dispersion: s.dispersion, thicknessNm: s.chipNm });
    const chip = recipe.chips[settings.chip] as ResolvedRecipe['chips'][number];
    monitor = buildChipMonitor({
      incident: recipe.incident,
      substrate: chip.substrate,
      back: chip.back,
      substrateThicknessNm: chip.thicknessMm * 1e6,
      below,
      growing: (mine.at(-1) as { dispersion: Dispersion }).dispersion,
      wavelengthNm: settings.wavelengthNm,
      bandwidthNm: settings.bandwidthNm,
      angleDeg: settings.angleDeg,
      signal: settings.signal,
    });
    cache.set(key, monitor);
  }
  return monitor.signalAt((mine.at(-1) as { chipNm: number }).chipNm);
}

/** Steps the chamber one reading time at a time with no shutter commands; calls `each` after every reading. */
function idle(chamber: VirtualChamber, untilS: number, each: (r: Reading) => void): void {
  for (;;) {
    const t = chamber.nextReadingTimeS();
    if (t > untilS) break;
    chamber.advance(t, each);
  }
  chamber.advance(untilS, each);
}

describe('ideal profile: the model of the true stack, exactly', () => {
  it.each([
    ['edge filter (two chips, 2 nm pass band, levels)', 'edge'],
    ['quarter-wave mirror (one chip, turning points)', 'mirror'],
  ] as const)('%s: optical readings equal buildChipMonitor on the true stack to 1e-12', (_name, which) => {
    const recipe = recipes[which];
    const chamber = createVirtualChamber(recipe, profiles.ideal, 1);
    const cache = new Map<string, ChipMonitor>();
    let worst = 0;
    let count = 0;
    runOracle(chamber, recipe, {
      onReading: (r) => {
        if (r.channel !== 'optical') return;
        const diff = Math.abs(r.value - expectedSignal(recipe, chamber.truth(), cache));
        worst = Math.max(worst, diff);
        count++;
      },
    });
    expect(count).toBeGreaterThan(1000);
    expect(worst).toBeLessThanOrEqual(1e-12);
    const truth = chamber.truth();
    expect(truth.layers.map((l) => l.number)).toEqual(recipe.layers.map((l) => l.number));
  });

  it('true stack: design indices, recipe rates, ratios and delays', () => {
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, profiles.ideal, 1);
    runOracle(chamber, recipe, { lastLayer: 14 });
    const truth = chamber.truth();
    for (const layer of truth.layers) {
      const r = recipe.layers[layer.number - 1] as ResolvedRecipe['layers'][number];
      // the true dispersion is the design's own object (no offset, no scatter, no extra k)
      expect(truth.materials[layer.material]?.dispersion).toBe(r.dispersion);
      const closeS = layer.closeS as number;
      // thickness = rate × time open (constant rate, exact integration; rounding only)
      expect(layer.partNm).toBeCloseTo(r.rateNmPerS * (closeS - layer.openS), 9);
      expect(layer.chipNm / layer.partNm).toBeCloseTo(r.chipRatio, 14);
      expect(layer.crystalNm * r.toolingFactor).toBeCloseTo(layer.partNm, 9);
    }
    // every shutter moves exactly the recipe's delay after its command (ideal: no jitter)
    for (const move of truth.moves) expect(move.moveS - move.commandS).toBeCloseTo(recipe.layers[move.layer - 1]?.shutterDelayS as number, 12);
  });

  it('a new chip starts bare: at zero thickness layer 13 reads the plan start signal on chip B', () => {
    const recipe = recipes.edge;
    const plan = planRun(recipe, { suggest: 'none' });
    // layer 13 is the first on chip B: no layers below, so the plan's start signal is the bare chip's
    const chamber = createVirtualChamber(recipe, profiles.ideal, 1);
    const r13 = recipe.layers[12] as ResolvedRecipe['layers'][number];
    chamber.command(open(r13.materialName, 13, 0));
    chamber.advance(0.2, () => undefined); // the recipe's delay: the shutter opens at 0.2 s, nothing has grown yet
    const t = chamber.truth();
    expect(t.monitor.layer).toBe(13);
    expect(t.monitor.chip).toBe(1);
    expect(Math.abs(t.monitor.signal - (plan.layers[12]?.startSignal as number))).toBeLessThan(1e-12);
    // while before the open the monitor still showed layer 1's settings on chip A
    const before = createVirtualChamber(recipe, profiles.ideal, 1).truth();
    expect([before.monitor.layer, before.monitor.chip]).toEqual([1, 0]);
    expect(Math.abs(before.monitor.signal - (plan.layers[0]?.startSignal as number))).toBeLessThan(1e-12);
  });

  it('crystal readings round-trip through the crystal model (stackThicknessNm) to 1e-9 relative', () => {
    const recipe = recipes.ar4;
    const chamber = createVirtualChamber(recipe, profiles.ideal, 3);
    let checked = 0;
    let worst = 0;
    runOracle(chamber, recipe, {
      onReading: (r) => {
        if (r.channel !== 'crystal') return;
        const truth = chamber.truth();
        const top = truth.layers.at(-1);
        if (top === undefined) {
          expect(r.value).toBe(recipe.crystal.bareFrequencyHz);
          return;
        }
        const below: CrystalLayer[] = truth.layers.slice(0, -1).map((l) => ({
          thicknessNm: l.crystalNm,
          densityGPerCm3: truth.materials[l.material]?.densityGPerCm3 as number,
          zRatio: truth.materials[l.material]?.zRatio as number,
        }));
        const film = truth.materials[top.material] as { densityGPerCm3: number; zRatio: number };
        if (top.crystalNm === 0) {
          // the instant the shutter opens: the frequency of the layers below (the inverse may see it an ulp high and give NaN)
          expect(r.value / stackFrequencyHz(recipe.crystal.bareFrequencyHz, below) - 1).toBeLessThan(1e-15);
          return;
        }
        const back = stackThicknessNm(recipe.crystal.bareFrequencyHz, r.value, below, film);
        worst = Math.max(worst, Math.abs(back - top.crystalNm) / Math.max(1, top.crystalNm));
        checked++;
      },
    });
    expect(checked).toBeGreaterThan(1000);
    expect(worst).toBeLessThan(1e-9);
  });
});

describe('optical monitor faults', () => {
  it('detector noise has the configured rms (within σ/√(2N)) and is white', () => {
    const chamber = createVirtualChamber(recipes.edge, idealWith({ optical: { noisePercent: 0.1 } }), 5);
    const residuals: number[] = [];
    idle(chamber, 2000, (r) => {
      if (r.channel === 'optical') residuals.push(r.value - chamber.truth().monitor.signal);
    });
    const n = residuals.length;
    expect(n).toBe(20001); // 10 Hz from t = 0 (the recipe's rate)
    const { mean, rms } = meanAndRms(residuals);
    // sd of a Gaussian sample's rms is σ/√(2N) (large-sample result; e.g. Kendall & Stuart, from memory): 4σ band
    expect(Math.abs(rms - 0.001)).toBeLessThan((4 * 0.001) / Math.sqrt(2 * n));
    expect(Math.abs(mean)).toBeLessThan((4 * 0.001) / Math.sqrt(n));
    expect(Math.abs(autocorrelation(residuals, 1))).toBeLessThan(4 / Math.sqrt(n));
  });

  it('gain and offset drift by the configured amounts per hour', () => {
    const gain = createVirtualChamber(recipes.edge, idealWith({ optical: { gainDriftPercentPerHour: 0.5 } }), 1);
    const g: Reading[] = [];
    idle(gain, 7200, (r) => r.channel === 'optical' && g.push(r));
    const s0 = (g[0] as Reading).value;
    const at = (list: Reading[], t: number) => (list.find((r) => Math.abs(r.timeS - t) < 1e-9) as Reading).value;
    // value = (1 + 0.005·t/3600)·S with S constant (no deposition): definition of the knob
    expect(at(g, 3600) / s0).toBeCloseTo(1.005, 12);
    expect(at(g, 7200) / s0).toBeCloseTo(1.01, 12);
    const offset = createVirtualChamber(recipes.edge, idealWith({ optical: { offsetDriftPercentPerHour: -0.2 } }), 1);
    const o: Reading[] = [];
    idle(offset, 3600, (r) => r.channel === 'optical' && o.push(r));
    expect(at(o, 3600) - (o[0] as Reading).value).toBeCloseTo(-0.002, 12);
  });

  it('a listed dropout leaves a gap in the optical readings only', () => {
    const chamber = createVirtualChamber(recipes.edge, idealWith({ optical: { dropouts: [{ atS: 50, durationS: 5 }] } }), 1);
    const all: Reading[] = [];
    idle(chamber, 100, (r) => all.push(r));
    const opticalTimes = all.filter((r) => r.channel === 'optical').map((r) => r.timeS);
    expect(opticalTimes.some((t) => t >= 50 && t < 55)).toBe(false);
    expect(opticalTimes).toContain(49.9);
    expect(opticalTimes).toContain(55);
    expect(opticalTimes.length).toBe(1001 - 50);
    expect(all.filter((r) => r.channel === 'crystal' && r.timeS >= 50 && r.timeS < 55).length).toBe(50);
    // the next reading after 49.9 s is the crystal's at 50 s, and after the crystal's 54.9 s the optical one at 55 s
    const c = createVirtualChamber(recipes.edge, idealWith({ optical: { dropouts: [{ atS: 50, durationS: 5 }] }, crystal: { sampleRateHz: 0.1 } }), 1);
    c.advance(49.95, () => undefined);
    expect(c.nextReadingTimeS()).toBe(50); // crystal at 0.1 Hz: 50 s is one of its samples
    c.advance(50, () => undefined);
    expect(c.nextReadingTimeS()).toBe(55);
    expect(c.truth().monitor.dropouts).toEqual([[50, 55]]);
  });

  it('random dropouts come at the configured rate (Poisson)', () => {
    const chamber = createVirtualChamber(recipes.edge, idealWith({ optical: { dropoutRatePerHour: 10, dropoutDurationS: 2, sampleRateHz: 1 }, crystal: { sampleRateHz: 0.01 } }), 2);
    const times: number[] = [];
    idle(chamber, 36_000, (r) => r.channel === 'optical' && times.push(r.timeS));
    const windows = chamber.truth().monitor.dropouts;
    // 10 h at 10/h (the dead time of 2 s per gap is negligible): mean 100, sd 10 (Poisson)
    expect(Math.abs(windows.length - 100)).toBeLessThan(40);
    // every gap removes exactly its 1-Hz samples, and no others are missing
    let missing = 0;
    for (const [a, b] of windows) missing += Math.ceil(Math.min(b, 36_000.5)) - Math.ceil(a);
    expect(times.length).toBe(36_001 - missing);
    for (const [a, b] of windows) expect(times.some((t) => t >= a && t < b)).toBe(false);
  });

  it('spikes come at the configured rate and size, and leave the other readings unchanged', () => {
    const base = { optical: { noisePercent: 0.1 } };
    const spiky = { optical: { noisePercent: 0.1, spikeRatePerHour: 60, spikePercent: 3 } };
    const a: Reading[] = [];
    const b: Reading[] = [];
    idle(createVirtualChamber(recipes.edge, idealWith(base), 4), 36_000, (r) => r.channel === 'optical' && a.push(r));
    const chamber = createVirtualChamber(recipes.edge, idealWith(spiky), 4);
    idle(chamber, 36_000, (r) => r.channel === 'optical' && b.push(r));
    expect(b.length).toBe(a.length);
    const diffs = a.map((r, i) => (b[i] as Reading).value - r.value).filter((d) => Math.abs(d) > 1e-12);
    // 10 h at 60/h: mean 600, sd 24.5 (Poisson); two arrivals within one 0.1 s sample merge (rare)
    expect(Math.abs(diffs.length - 600)).toBeLessThan(4 * Math.sqrt(600));
    for (const d of diffs) expect(Math.abs(Math.abs(d) - 0.03)).toBeLessThan(1e-12);
    expect(chamber.truth().monitor.spikeTimesS.length).toBe(diffs.length);
    // both signs, about equally often (binomial, 4σ)
    const up = diffs.filter((d) => d > 0).length;
    expect(Math.abs(up - diffs.length / 2)).toBeLessThan(2 * Math.sqrt(diffs.length));
  });

  it('samples once per substrate-holder revolution', () => {
    const chamber = createVirtualChamber(recipes.edge, idealWith({ optical: { perRevolution: { revolutionsPerMinute: 24 }, sampleRateHz: 50 } }), 1);
    const times: number[] = [];
    idle(chamber, 60, (r) => r.channel === 'optical' && times.push(r.timeS));
    expect(times).toEqual(Array.from({ length: 25 }, (_, i) => i * 2.5));
  });

  it('the pass band is evaluated with the true dispersion at each of its wavelengths', () => {
    // n_true(λ) = 1.02·n_design(λ) at every pass-band wavelength (not only at the centre)
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, idealWith({ materials: { default: { indexOffsetPercent: 2 } } }), 1);
    const truth = chamber.truth();
    const layer = recipe.layers[1] as ResolvedRecipe['layers'][number];
    const band = passBand(layer.wavelengthNm, layer.bandwidthNm);
    expect(band.wavelengthsNm.length).toBeGreaterThan(1); // a real band, several wavelengths
    for (const w of band.wavelengthsNm) {
      const d = indexAt({ n: 0, k: 0 }, layer.dispersion, w);
      const t = indexAt({ n: 0, k: 0 }, truth.materials[layer.materialName]?.dispersion as Dispersion, w);
      expect(t.n / d.n).toBeCloseTo(1.02, 14);
    }
  });
});

describe('material faults', () => {
  it('index offset and extra absorption are applied to every layer of the material', () => {
    const recipe = recipes.ar4;
    const profile = idealWith({ materials: { default: { indexOffsetPercent: 1 }, TiO2: { indexOffsetPercent: -1.5, extraK: 3e-4 } } });
    const chamber = createVirtualChamber(recipe, profile, 1);
    runOracle(chamber, recipe);
    for (const l of chamber.truth().layers) {
      const r = recipe.layers[l.number - 1] as ResolvedRecipe['layers'][number];
      const d = indexAt({ n: 0, k: 0 }, r.dispersion, r.wavelengthNm);
      expect(l.nTrue / d.n).toBeCloseTo(l.material === 'TiO2' ? 0.985 : 1.01, 14);
      expect(l.kTrue - d.k).toBeCloseTo(l.material === 'TiO2' ? 3e-4 : 0, 16);
    }
  });

  it('index scatter: one draw per material and seed, with the configured rms', () => {
    const profile = idealWith({ materials: { default: { indexScatterPercent: 0.5 } } });
    const ti: number[] = [];
    const si: number[] = [];
    for (let seed = 0; seed < 800; seed++) {
      const t = createVirtualChamber(recipes.ar4, profile, seed).truth();
      ti.push((t.materials.TiO2?.indexFactor as number) - 1);
      si.push((t.materials.SiO2?.indexFactor as number) - 1);
    }
    // sd of a sample rms: σ/√(2N); Pearson r of independent draws: sd 1/√N (4σ bands)
    for (const xs of [ti, si]) expect(Math.abs(meanAndRms(xs).rms - 0.005)).toBeLessThan((4 * 0.005) / Math.sqrt(2 * 800));
    const r = ti.reduce((acc, x, i) => acc + x * (si[i] as number), 0) / (800 * 0.005 * 0.005);
    expect(Math.abs(r)).toBeLessThan(4 / Math.sqrt(800));
    // the draw does not depend on other knobs (its own stream)
    const noisy = createVirtualChamber(recipes.ar4, idealWith({ materials: { default: { indexScatterPercent: 0.5 } }, optical: { noisePercent: 1 }, sources: { default: { fluctuationPercent: 3 } } }), 17).truth();
    expect((noisy.materials.TiO2?.indexFactor as number) - 1).toBe(ti[17]);
  });

  it('inhomogeneity: a staircase of 8 sub-layers with a linear index profile, seen by the monitor', () => {
    const recipe = recipes.mirror;
    const profile = idealWith({ materials: { Ta2O5: { inhomogeneityPercent: 4 } } });
    const chamber = createVirtualChamber(recipe, profile, 1);
    const cache = new Map<string, ChipMonitor>();
    let worst = 0;
    runOracle(chamber, recipe, {
      lastLayer: 3,
      onReading: (r) => {
        if (r.channel === 'optical') worst = Math.max(worst, Math.abs(r.value - expectedSignal(recipe, chamber.truth(), cache)));
      },
    });
    expect(worst).toBeLessThan(1e-12);
    const truth = chamber.truth();
    const first = truth.layers[0] as ChamberTruth['layers'][number];
    const r = recipe.layers[0] as ResolvedRecipe['layers'][number];
    expect(first.material).toBe('Ta2O5');
    const sliceNm = (r.targetNm * r.chipRatio) / INHOMOGENEITY_SLICES;
    expect(first.slices.length).toBeGreaterThanOrEqual(INHOMOGENEITY_SLICES);
    const nDesign = indexAt({ n: 0, k: 0 }, r.dispersion, r.wavelengthNm).n;
    first.slices.forEach((s, j) => {
      if (j < first.slices.length - 1) expect(s.chipNm).toBeCloseTo(sliceNm, 12);
      // n(z) = n·(1 + 0.04·(z/d − ½)) at the slice centres z = (j + ½)·d/8 (the knob's definition)
      const n = indexAt({ n: 0, k: 0 }, s.dispersion, r.wavelengthNm).n;
      expect(n / nDesign).toBeCloseTo(1 + 0.04 * ((j + 0.5) / 8 - 0.5), 13);
    });
    expect(first.slices.reduce((acc, s) => acc + s.chipNm, 0)).toBeCloseTo(first.chipNm, 10);
    // and it matters: the homogeneous layer of the same thickness reads differently
    const flat = buildChipMonitor({
      incident: recipe.incident,
      substrate: recipe.chips[0]?.substrate as Dispersion,
      back: 'incoherent',
      substrateThicknessNm: 1e6,
      below: [],
      growing: r.dispersion,
      wavelengthNm: r.wavelengthNm,
      bandwidthNm: r.bandwidthNm,
      angleDeg: 0,
      signal: 'transmission',
    });
    const sliced = expectedSignal(recipe, { ...truth, monitor: { ...truth.monitor, layer: 1 } }, new Map());
    expect(Math.abs(flat.signalAt(first.chipNm) - sliced)).toBeGreaterThan(1e-4);
  });
});

describe('source faults', () => {
  it('bias, ramp and drift give the thickness of their closed-form integral', () => {
    const profile = idealWith({ sources: { default: { rateBiasPercent: 3, rampTimeConstantS: 2, driftPercentPerHour: 2, chipRatioErrorPercent: 1, toolingErrorPercent: -2 } } });
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, profile, 1);
    const r1 = recipe.layers[0] as ResolvedRecipe['layers'][number];
    chamber.command(open(r1.materialName, 1, 10));
    chamber.advance(1800, () => undefined);
    const layer = chamber.truth().layers[0] as ChamberTruth['layers'][number];
    const t0 = layer.openS;
    expect(t0).toBeCloseTo(10.2, 12);
    // ∫_{t0}^{t} R(1.03)(1 − e^{−(s−t0)/τ})(1 + D s) ds, D = 0.02/3600 per s (elementary integrals, derived)
    const d = 0.02 / 3600;
    const u = 1800 - t0;
    const tau = 2;
    const expected = r1.rateNmPerS * 1.03 * (u + (d * (1800 ** 2 - t0 ** 2)) / 2 - ((1 + d * t0) * tau * (1 - Math.exp(-u / tau)) + d * tau * (tau - Math.exp(-u / tau) * (u + tau))));
    expect(Math.abs(layer.partNm - expected) / expected).toBeLessThan(1e-12);
    expect(layer.chipNm / layer.partNm).toBeCloseTo(r1.chipRatio * 1.01, 14);
    expect(layer.partNm / layer.crystalNm).toBeCloseTo(r1.toolingFactor * 0.98, 12);
  });

  it('the rate fluctuates with the configured rms (thickness grown per second, long layer)', () => {
    const profile = idealWith({ sources: { default: { fluctuationPercent: 2, fluctuationCorrelationS: 20 } }, optical: { sampleRateHz: 1 }, crystal: { sampleRateHz: 0.1 } });
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, profile, 8);
    const r1 = recipe.layers[0] as ResolvedRecipe['layers'][number];
    chamber.command(open(r1.materialName, 1, 0));
    chamber.advance(1, () => undefined);
    let last = chamber.truth().layers[0]?.partNm as number;
    const x: number[] = [];
    for (let t = 2; t <= 40_001; t++) {
      chamber.advance(t, () => undefined);
      const now = chamber.truth().layers[0]?.partNm as number;
      x.push((now - last) / r1.rateNmPerS - 1);
      last = now;
    }
    // The 1-s mean of an OU process has variance 2σ²(τ/Δ)²(Δ/τ − 1 + e^{−Δ/τ}) (integral of its
    // autocovariance; derived); sd of the rms estimate ≈ rms·√(τ/(2T)) for T ≫ τ (Bartlett, from memory).
    const ratio = 1 / 20;
    const expectedRms = 0.02 * Math.sqrt((2 * (ratio - 1 + Math.exp(-ratio))) / (ratio * ratio));
    const { rms } = meanAndRms(x);
    expect(Math.abs(rms - expectedRms) / expectedRms).toBeLessThan(4 * Math.sqrt(20 / (2 * 40_000)));
    // correlated, not white: the lag-20 s correlation is about 1/e
    expect(autocorrelation(x, 20)).toBeGreaterThan(0.25);
    expect(autocorrelation(x, 20)).toBeLessThan(0.5);
  });

  it('shutter delays lie within delay ± 3 jitter, with the configured mean and rms', () => {
    const profile = idealWith({ sources: { default: { shutterDelayS: 0.2, shutterJitterS: 0.02 } } });
    const recipe = recipes.ar4;
    const chamber = createVirtualChamber(recipe, profile, 6);
    const source = recipe.layers[0]?.materialName as string;
    const acks: number[] = [];
    for (let i = 0; i < 1000; i++) {
      chamber.advance(2 * i, () => undefined);
      chamber.command(open(source, 1, 2 * i));
      chamber.advance(2 * i + 1, () => undefined);
      chamber.command(close(source, 1, 2 * i + 1));
      for (const a of chamber.takeAcks()) acks.push(a.timeS);
    }
    chamber.advance(2001, () => undefined);
    for (const a of chamber.takeAcks()) acks.push(a.timeS);
    const moves = chamber.truth().moves;
    expect(moves.length).toBe(2000);
    expect(acks).toEqual(moves.map((m) => m.moveS));
    const jitter = moves.map((m) => m.moveS - m.commandS - 0.2);
    for (const j of jitter) expect(Math.abs(j)).toBeLessThanOrEqual(0.06 + 1e-12);
    const { mean, rms } = meanAndRms(jitter);
    // clipping N(0,1) at ±3 leaves variance 0.99501 (derived from the normal table: 1 − 2·3·φ(3) − 2(1 − Φ(3)) + 2·9·(1 − Φ(3)))
    const sigma = 0.02 * Math.sqrt(0.99501);
    expect(Math.abs(mean)).toBeLessThan((4 * sigma) / Math.sqrt(2000));
    expect(Math.abs(rms - sigma)).toBeLessThan((4 * sigma) / Math.sqrt(2 * 2000));
    // the layer was topped up 1000 times
    expect(chamber.truth().layers[0]?.openings).toBe(1000);
  });
});

describe('crystal faults', () => {
  it('temperature shift follows the first-order heat load while a shutter is open and relaxes after', () => {
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, idealWith({ crystal: { temperatureShiftHz: 5, temperatureTimeConstantS: 30 } }), 1);
    const source = recipe.layers[0]?.materialName as string;
    chamber.command(open(source, 1, 0));
    let checked = 0;
    const each = (r: Reading) => {
      if (r.channel !== 'crystal') return;
      const t = r.timeS;
      // h = 1 − e^{−(t − 0.2)/τ} while open (0.2 s to 100.2 s), then h(100.2)·e^{−(t − 100.2)/τ} (first-order lag, the knob's definition)
      const h = t < 0.2 ? 0 : t <= 100.2 ? 1 - Math.exp(-(t - 0.2) / 30) : (1 - Math.exp(-100 / 30)) * Math.exp(-(t - 100.2) / 30);
      expect(r.value - chamber.truth().crystal.massFrequencyHz).toBeCloseTo(5 * h, 8);
      checked++;
    };
    idle(chamber, 100, each);
    chamber.command(close(source, 1, 100));
    idle(chamber, 300, each);
    expect(checked).toBe(3001);
  });

  it('frequency noise has the configured rms (within σ/√(2N)) and is white', () => {
    const chamber = createVirtualChamber(recipes.edge, idealWith({ crystal: { noiseHz: 0.05 } }), 12);
    const residuals: number[] = [];
    idle(chamber, 2000, (r) => r.channel === 'crystal' && residuals.push(r.value - chamber.truth().crystal.massFrequencyHz));
    const n = residuals.length;
    expect(n).toBe(20001);
    const { mean, rms } = meanAndRms(residuals);
    // as for the optical noise: sd of the sample rms σ/√(2N), of the mean σ/√N, of r(1) 1/√N (4σ bands)
    expect(Math.abs(rms - 0.05)).toBeLessThan((4 * 0.05) / Math.sqrt(2 * n));
    expect(Math.abs(mean)).toBeLessThan((4 * 0.05) / Math.sqrt(n));
    expect(Math.abs(autocorrelation(residuals, 1))).toBeLessThan(4 / Math.sqrt(n));
  });

  it('a mode hop shifts every later reading by its jump', () => {
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, idealWith({ crystal: { modeHop: { atS: 50.05, jumpHz: -250 } } }), 1);
    chamber.command(open(recipe.layers[0]?.materialName as string, 1, 0));
    const offsets: [number, number][] = [];
    idle(chamber, 100, (r) => r.channel === 'crystal' && offsets.push([r.timeS, r.value - chamber.truth().crystal.massFrequencyHz]));
    for (const [t, d] of offsets) expect(d).toBe(t >= 50.05 ? -250 : 0);
  });

  it('the crystal fails when its used life reaches the set fraction, and the optical monitor goes on', () => {
    const recipe = recipes.edge;
    const chamber = createVirtualChamber(recipe, idealWith({ crystal: { failAtLifeFraction: 0.002 } }), 1);
    const f0 = recipe.crystal.bareFrequencyHz;
    const fMin = recipe.crystal.minUsableFrequencyHz;
    const crystal: Reading[] = [];
    let opticalAfter = 0;
    runOracle(chamber, recipe, {
      lastLayer: 2,
      onReading: (r) => {
        if (r.channel === 'crystal') crystal.push(r);
        else if (chamber.truth().crystal.failedAtS !== null) opticalAfter++;
      },
    });
    const failedAtS = chamber.truth().crystal.failedAtS as number;
    expect(failedAtS).toBeGreaterThan(0);
    const last = crystal.at(-1) as Reading;
    expect(crystalLifeUsed(f0, last.value, fMin)).toBeLessThan(0.002);
    expect(last.timeS).toBeCloseTo(failedAtS - 0.1, 9);
    expect(crystal.every((r) => r.timeS < failedAtS)).toBe(true);
    expect(opticalAfter).toBeGreaterThan(100);
    // the same run stopped at the failure: the true mass had used at least 0.2 % of the span there
    const again = createVirtualChamber(recipe, idealWith({ crystal: { failAtLifeFraction: 0.002 } }), 1);
    runOracle(again, recipe, { lastLayer: 2, maxTimeS: failedAtS });
    expect(again.timeS).toBe(failedAtS);
    expect(crystalLifeUsed(f0, again.truth().crystal.massFrequencyHz, fMin)).toBeGreaterThanOrEqual(0.002);
  });
});

describe('commands', () => {
  it('refuses commands that name an unknown source or layer, or go back', () => {
    const recipe = recipes.ar4;
    const chamber = createVirtualChamber(recipe, profiles.ideal, 1);
    chamber.command(open('Gold', 1, 0));
    chamber.command(open('TiO2', 0, 0));
    chamber.command(open('TiO2', 5, 0));
    chamber.command(open('TiO2', 1.5, 0));
    chamber.command(open('TiO2', 1, 0));
    chamber.command(open('SiO2', 1, 0)); // layer 1 is already TiO2's
    chamber.command(open('SiO2', 2, 0));
    chamber.command(open('TiO2', 1, 0)); // back to layer 1
    chamber.advance(10, () => undefined);
    const truth = chamber.truth();
    expect(truth.refused.map((r) => r.command.layer)).toEqual([1, 0, 5, 1.5, 1, 1]);
    expect(truth.moves.length).toBe(2);
    expect(chamber.takeAcks().map((a) => [a.source, a.action])).toEqual([
      ['TiO2', 'open'],
      ['SiO2', 'open'],
    ]);
    // layer 2 opened on top of layer 1 (both moves at 0.2 s): layer 1 ends there, co-deposition not modelled
    expect(truth.layers.map((l) => [l.number, l.endedBy])).toEqual([
      [1, 'next-open'],
      [2, null],
    ]);
  });

  it('a command in the past takes effect now; a shutter never moves before its previous move', () => {
    const chamber = createVirtualChamber(recipes.ar4, idealWith({ sources: { default: { shutterDelayS: 0.5 } } }), 1);
    chamber.advance(10, () => undefined);
    chamber.command(open('TiO2', 1, 3));
    chamber.command(close('TiO2', 1, 3));
    chamber.advance(20, () => undefined);
    expect(chamber.truth().moves.map((m) => [m.commandS, m.moveS])).toEqual([
      [10, 10.5],
      [10, 10.5],
    ]);
  });

  it('refuses a profile that names a material the recipe does not use', () => {
    expect(() => createVirtualChamber(recipes.ar4, idealWith({ materials: { Ta2O5: { extraK: 0.001 } } }), 1)).toThrow(/Ta2O5/);
    expect(() => createVirtualChamber(recipes.ar4, profiles.ideal, 0.5)).toThrow(RangeError);
  });
});

describe('determinism', () => {
  function run(profile: SimProfile, seed: number): string {
    const chamber = createVirtualChamber(recipes.ar4, profile, seed);
    const { readings, acks } = runOracle(chamber, recipes.ar4);
    return JSON.stringify({ readings, acks });
  }

  it('the same seed gives the same run byte for byte; another seed another run', () => {
    const a = run(profiles.harsh, 7);
    expect(run(profiles.harsh, 7)).toBe(a);
    expect(run(profiles.harsh, 8)).not.toBe(a);
    expect(run(profiles.typical, 7)).not.toBe(a);
  });

  it('the typical profile produces readings near the ideal ones', () => {
    // typical faults are percent-level: every optical reading lies within 10 % of full scale of the ideal run's at the same time (common practice, no source)
    const ideal = JSON.parse(run(profiles.ideal, 1)) as { readings: Reading[] };
    const typical = JSON.parse(run(profiles.typical, 1)) as { readings: Reading[] };
    const byTime = new Map(ideal.readings.filter((r) => r.channel === 'optical').map((r) => [r.timeS, r.value]));
    let compared = 0;
    for (const r of typical.readings) {
      const v = r.channel === 'optical' ? byTime.get(r.timeS) : undefined;
      if (v === undefined) continue;
      expect(Math.abs(r.value - v)).toBeLessThan(0.1);
      compared++;
    }
    expect(compared).toBeGreaterThan(1000);
  });
});

describe('frequencies stay those of the crystal model', () => {
  it('mass frequency of the truth equals stackFrequencyHz of its layers', () => {
    const recipe = recipes.ar4;
    const chamber = createVirtualChamber(recipe, profiles.typical, 2);
    runOracle(chamber, recipe);
    const truth = chamber.truth();
    const layers = truth.layers.map((l) => ({ thicknessNm: l.crystalNm, densityGPerCm3: truth.materials[l.material]?.densityGPerCm3 as number, zRatio: truth.materials[l.material]?.zRatio as number }));
    expect(truth.crystal.massFrequencyHz).toBe(stackFrequencyHz(recipe.crystal.bareFrequencyHz, layers));
  });
});
