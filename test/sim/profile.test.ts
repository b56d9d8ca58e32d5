// Simulator profiles: the shipped files say what the issue asks of them, the schema refuses
// typos and bad values with their path, and per-material entries override `default` field by field.
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { ConfigError } from '../../src/config/validation.ts';
import { indexAt, type Dispersion } from '../../src/model/optics/dispersion.ts';
import { loadSimProfile, materialSettingsFor, scaledDispersion, SimProfileSchema, sourceSettingsFor } from '../../sim/index.ts';
import { profiles } from './support.ts';

const { ideal, typical, harsh, uncalibrated } = profiles;

describe('shipped profiles', () => {
  it('typical has the values the issue names', () => {
    // The typical profile: 0.1 % rms monitor noise at 10 Hz, ±2 % correlated rate fluctuation
    // (read as 2 % rms), 1 % index offsets, gain drift 0.5 %/h, shutter delay 0.2 s ± 20 ms, crystal 10 Hz.
    expect(typical.optical.noisePercent).toBe(0.1);
    expect(typical.optical.sampleRateHz).toBe(10);
    expect(typical.sources.default.fluctuationPercent).toBe(2);
    expect(typical.materials.default.indexOffsetPercent).toBe(1);
    expect(typical.optical.gainDriftPercentPerHour).toBe(0.5);
    expect(typical.sources.default.shutterDelayS).toBe(0.2);
    expect(typical.sources.default.shutterJitterS).toBe(0.02);
    expect(typical.crystal.sampleRateHz).toBe(10);
  });

  it('the schema defaults are the typical profile', () => {
    const defaults = SimProfileSchema.parse({ formatVersion: 1, name: 'typical' });
    const { description, ...rest } = typical;
    expect(description).toMatch(/e-beam/);
    expect(rest).toEqual({ ...defaults, sources: { default: { ...defaults.sources.default, shutterDelayS: 0.2 } }, optical: { ...defaults.optical, sampleRateHz: 10 }, crystal: { ...defaults.crystal, sampleRateHz: 10 } });
  });

  it('spectral is typical with the issue’s spectral monitor: 400–900 nm in 2 nm steps, 5 spectra/s, 0.2 % noise', () => {
    const spectral = loadSimProfile(join(import.meta.dirname, '../../config/sim/spectral.yaml'));
    const { spectral: monitor, ...rest } = spectral;
    expect(rest).toEqual({ ...typical, name: 'spectral', description: expect.stringMatching(/spectrometer/) as unknown });
    expect(monitor).toMatchObject({ grid: { fromNm: 400, toNm: 900, stepNm: 2 }, rateHz: 5, noisePercent: 0.2, form: 'table' });
    // The schema's defaults for the monitor are the file's.
    expect(SimProfileSchema.parse({ formatVersion: 1, name: 's', spectral: {} }).spectral).toEqual(monitor);
    expect(typical.spectral).toBeUndefined();
  });

  it('uncalibrated is typical with the chip ratio and the tooling factor off', () => {
    expect([typical.sources.default.chipRatioErrorPercent, typical.sources.default.toolingErrorPercent]).toEqual([0, 0]);
    expect(uncalibrated).toEqual({
      ...typical,
      name: 'uncalibrated',
      description: uncalibrated.description,
      sources: { default: { ...typical.sources.default, chipRatioErrorPercent: 0.5, toolingErrorPercent: 1.5 } },
    });
    expect(uncalibrated.description).toMatch(/typical/);
  });

  it('harsh has five times the noise and drift of typical, spikes and a dropout', () => {
    const five = (a: number, b: number) => expect(a).toBeCloseTo(5 * b, 12);
    five(harsh.optical.noisePercent, typical.optical.noisePercent);
    five(harsh.optical.gainDriftPercentPerHour, typical.optical.gainDriftPercentPerHour);
    five(harsh.optical.offsetDriftPercentPerHour, typical.optical.offsetDriftPercentPerHour);
    five(harsh.sources.default.fluctuationPercent, typical.sources.default.fluctuationPercent);
    five(harsh.sources.default.driftPercentPerHour, typical.sources.default.driftPercentPerHour);
    five(harsh.sources.default.shutterJitterS, typical.sources.default.shutterJitterS);
    five(harsh.crystal.noiseHz, typical.crystal.noiseHz);
    five(harsh.crystal.temperatureShiftHz, typical.crystal.temperatureShiftHz);
    expect(harsh.optical.spikeRatePerHour).toBeGreaterThan(0);
    expect(harsh.optical.spikePercent).toBeGreaterThan(0);
    expect(harsh.optical.dropouts.length).toBe(1);
  });

  it('ideal has every fault knob at zero and takes delays and sample rates from the recipe', () => {
    const s = ideal.sources.default;
    for (const v of [s.rateBiasPercent, s.rampTimeConstantS, s.fluctuationPercent, s.driftPercentPerHour, s.shutterJitterS, s.chipRatioErrorPercent, s.toolingErrorPercent]) expect(v).toBe(0);
    expect(s.shutterDelayS).toBeUndefined();
    const m = ideal.materials.default;
    for (const v of [m.indexOffsetPercent, m.indexScatterPercent, m.extraK, m.inhomogeneityPercent]) expect(v).toBe(0);
    const o = ideal.optical;
    for (const v of [o.noisePercent, o.gainDriftPercentPerHour, o.offsetDriftPercentPerHour, o.spikeRatePerHour, o.dropoutRatePerHour]) expect(v).toBe(0);
    expect(o.dropouts).toEqual([]);
    expect(o.sampleRateHz).toBeUndefined();
    expect(o.perRevolution).toBeUndefined();
    const c = ideal.crystal;
    expect([c.noiseHz, c.temperatureShiftHz]).toEqual([0, 0]);
    expect(c.failAtLifeFraction).toBe(1);
    expect(c.modeHop).toBeUndefined();
    expect(Object.keys(ideal.sources)).toEqual(['default']);
    expect(Object.keys(ideal.materials)).toEqual(['default']);
  });

  it('loaded profiles are frozen', () => {
    expect(Object.isFrozen(typical.optical)).toBe(true);
  });
});

describe('SimProfileSchema', () => {
  const dir = mkdtempSync(join(tmpdir(), 'fringe-sim-'));
  function load(text: string): unknown {
    const file = join(dir, 'p.yaml');
    writeFileSync(file, text);
    try {
      return loadSimProfile(file);
    } catch (error) {
      return error;
    }
  }

  it('refuses an unknown key with its path', () => {
    const error = load('formatVersion: 1\nname: x\noptical: { noisePercnt: 0.1 }\n');
    expect(error).toBeInstanceOf(ConfigError);
    expect((error as ConfigError).violations).toEqual([{ at: 'optical', message: 'unknown key "noisePercnt" (a typo?)' }]);
    const inSource = load('formatVersion: 1\nname: x\nsources: { TiO2: { rateBias: 1 } }\n');
    expect((inSource as ConfigError).violations[0]?.at).toBe('sources.TiO2');
  });

  it('lists every bad value at once', () => {
    const error = load('formatVersion: 1\nname: x\noptical: { noisePercent: -1, sampleRateHz: 0 }\ncrystal: { failAtLifeFraction: 0 }\nsources: { default: { fluctuationPercent: 50 } }\n');
    const at = (error as ConfigError).violations.map((v) => v.at).sort();
    expect(at).toEqual(['crystal.failAtLifeFraction', 'optical.noisePercent', 'optical.sampleRateHz', 'sources.default.fluctuationPercent']);
  });

  it('overrides default field by field for a named material', () => {
    const p = SimProfileSchema.parse({
      formatVersion: 1,
      name: 'x',
      sources: { default: { rateBiasPercent: 4, shutterDelayS: 0.3 }, TiO2: { rateBiasPercent: -1 } },
      materials: { default: { indexOffsetPercent: 2 }, SiO2: { extraK: 1e-4 } },
    });
    expect(sourceSettingsFor(p, 'TiO2')).toMatchObject({ rateBiasPercent: -1, shutterDelayS: 0.3, fluctuationPercent: 2 });
    expect(sourceSettingsFor(p, 'SiO2')).toMatchObject({ rateBiasPercent: 4, shutterDelayS: 0.3 });
    expect(materialSettingsFor(p, 'SiO2')).toEqual({ indexOffsetPercent: 2, indexScatterPercent: 0.5, extraK: 1e-4, inhomogeneityPercent: 0 });
  });
});

describe('scaledDispersion', () => {
  const probe = { n: 0, k: 0 };
  const cases: [string, Dispersion][] = [
    ['constant', { model: 'constant', n: 2.1, k: 0.001 }],
    ['cauchy', { model: 'cauchy', n: [1.46753, 0.0035], k: [] }],
    ['cauchy with k', { model: 'cauchy', n: [2.2, 0.02, 0.001], k: [1e-4, 2e-5] }],
    // N-BK7, Schott catalogue Sellmeier (physics-notes)
    ['sellmeier', { model: 'sellmeier', A: 1, terms: [{ B: 1.03961212, C: 0.00600069867 }, { B: 0.231792344, C: 0.0200179144 }, { B: 1.01046945, C: 103.560653 }], cUnit: 'um2', k: 0 }],
    ['table', { model: 'table', points: [[400, 2.5, 0.01], [600, 2.3, 0.002], [800, 2.25, 0]] }],
  ];
  it.each(cases)('%s: n × factor and k + extra at every wavelength', (_name, d) => {
    const scaled = scaledDispersion(d, 1.013, 2e-4);
    expect(scaled.model).toBe(d.model);
    for (let w = 400; w <= 800; w += 7.3) {
      const { n, k } = indexAt(probe, d, w);
      const t = indexAt({ n: 0, k: 0 }, scaled, w);
      expect(Math.abs(t.n - n * 1.013)).toBeLessThan(1e-14);
      expect(Math.abs(t.k - (k + 2e-4))).toBeLessThan(1e-16);
    }
  });
  it('returns the design itself when nothing changes, and refuses bad factors', () => {
    const d = cases[1]?.[1] as Dispersion;
    expect(scaledDispersion(d, 1, 0)).toBe(d);
    expect(() => scaledDispersion(d, 0, 0)).toThrow(RangeError);
    expect(() => scaledDispersion(d, 1, -1)).toThrow(RangeError);
  });
});
