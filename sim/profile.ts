/**
 * The simulator profile: every way the virtual chamber departs from the recipe, one knob each,
 * with its unit. A profile file is YAML, validated once (unknown keys refused, every violation
 * listed with its path), given defaults and frozen.
 *
 * The defaults are the `typical` profile: a well-run e-beam box coater with a lock-in optical
 * monitor (invented demo values within the ranges of physics-notes.md "Process figures"; common
 * practice, no source). `config/sim/ideal.yaml` sets every fault knob to zero.
 *
 * Per source and per material the file has a `default` entry and optional entries named after
 * materials; a named entry overrides the `default` entry field by field.
 */
import { z } from 'zod';
import { loadConfigFile } from '../src/config/read-config.ts';

const finite = z.number().finite();
const nonNegative = finite.nonnegative();
const positive = finite.positive();

/** What a source (an evaporation source behind its shutter, named by its material) does. */
const sourceFields = {
  /** Fixed error of the true rate against the recipe's `rateNmPerS`, percent (+ = faster). Default 2. */
  rateBiasPercent: finite.min(-50).max(100),
  /**
   * Time constant of the rate's rise after the shutter opens, s: the rate is
   * planned × (1 − e^{−t/τ}). 0 = full rate at once. Default 2.
   */
  rampTimeConstantS: nonNegative.max(600),
  /**
   * rms of the rate's random fluctuation, percent of the rate: an Ornstein–Uhlenbeck process
   * (correlated, not white). At most 20 so that the rate stays positive (5σ). Default 2.
   */
  fluctuationPercent: nonNegative.max(20),
  /**
   * Correlation time of the fluctuation, s; at least 1 (faster fluctuation averages out in the
   * thickness, and the grid of the process is τ/20). Default 20.
   */
  fluctuationCorrelationS: finite.min(1).max(86400),
  /** Linear drift of the rate with run time, percent of the rate per hour (from t = 0). Default 1. */
  driftPercentPerHour: finite.min(-50).max(50),
  /**
   * True time from a shutter command to the shutter's move, s (open and close alike). Absent:
   * the recipe's `shutterDelayS` of the commanded layer.
   */
  shutterDelayS: nonNegative.max(10),
  /** rms jitter of the shutter delay, s; Gaussian clipped to ±3σ, never moving before the command. Default 0.02. */
  shutterJitterS: nonNegative.max(1),
  /** True chip ratio = recipe chipRatio × (1 + this/100), percent. Default 0.5. */
  chipRatioErrorPercent: finite.min(-50).max(50),
  /** True tooling factor = recipe toolingFactor × (1 + this/100), percent. Default 1.5. */
  toolingErrorPercent: finite.min(-50).max(50),
};

export const SourceSettingsSchema = z.strictObject({
  rateBiasPercent: sourceFields.rateBiasPercent.default(2),
  rampTimeConstantS: sourceFields.rampTimeConstantS.default(2),
  fluctuationPercent: sourceFields.fluctuationPercent.default(2),
  fluctuationCorrelationS: sourceFields.fluctuationCorrelationS.default(20),
  driftPercentPerHour: sourceFields.driftPercentPerHour.default(1),
  shutterDelayS: sourceFields.shutterDelayS.optional(),
  shutterJitterS: sourceFields.shutterJitterS.default(0.02),
  chipRatioErrorPercent: sourceFields.chipRatioErrorPercent.default(0),
  toolingErrorPercent: sourceFields.toolingErrorPercent.default(0),
});
export type SourceSettings = z.infer<typeof SourceSettingsSchema>;

/** A per-material source entry: any subset of the source knobs, overriding `default`. */
export const SourceOverrideSchema = z.strictObject({
  rateBiasPercent: sourceFields.rateBiasPercent.optional(),
  rampTimeConstantS: sourceFields.rampTimeConstantS.optional(),
  fluctuationPercent: sourceFields.fluctuationPercent.optional(),
  fluctuationCorrelationS: sourceFields.fluctuationCorrelationS.optional(),
  driftPercentPerHour: sourceFields.driftPercentPerHour.optional(),
  shutterDelayS: sourceFields.shutterDelayS.optional(),
  shutterJitterS: sourceFields.shutterJitterS.optional(),
  chipRatioErrorPercent: sourceFields.chipRatioErrorPercent.optional(),
  toolingErrorPercent: sourceFields.toolingErrorPercent.optional(),
});
export type SourceOverride = z.infer<typeof SourceOverrideSchema>;

/** How a deposited film differs from the design's optical constants. */
const materialFields = {
  /** Fixed error of the true index: n_true(λ) = n_design(λ)·(1 + this/100), percent. Default 1. */
  indexOffsetPercent: finite.min(-20).max(20),
  /** rms of a further random index error drawn once per material and seed, percent. Default 0.5. */
  indexScatterPercent: nonNegative.max(10),
  /** Absorption added to the design's k at every wavelength (dimensionless). Default 0. */
  extraK: nonNegative.max(1),
  /**
   * Linear change of n through the layer, percent of n from the bottom to the top of the planned
   * chip thickness (+ = denser toward the top); the mean over the planned thickness is unchanged.
   * Modelled as a staircase of 8 sub-layers per planned thickness, continued beyond it. Default 0.
   */
  inhomogeneityPercent: finite.min(-20).max(20),
};

export const MaterialSettingsSchema = z.strictObject({
  indexOffsetPercent: materialFields.indexOffsetPercent.default(1),
  indexScatterPercent: materialFields.indexScatterPercent.default(0.5),
  extraK: materialFields.extraK.default(0),
  inhomogeneityPercent: materialFields.inhomogeneityPercent.default(0),
});
export type MaterialSettings = z.infer<typeof MaterialSettingsSchema>;

export const MaterialOverrideSchema = z.strictObject({
  indexOffsetPercent: materialFields.indexOffsetPercent.optional(),
  indexScatterPercent: materialFields.indexScatterPercent.optional(),
  extraK: materialFields.extraK.optional(),
  inhomogeneityPercent: materialFields.inhomogeneityPercent.optional(),
});
export type MaterialOverride = z.infer<typeof MaterialOverrideSchema>;

const DropoutSchema = z.strictObject({
  /** Start of the gap, s of run time. */
  atS: nonNegative,
  /** Length of the gap, s: no optical reading in [atS, atS + durationS). */
  durationS: positive,
});

export const OpticalSettingsSchema = z.strictObject({
  /** rms of the additive detector noise of one reading, percent of full scale. Default 0.1. */
  noisePercent: nonNegative.max(20).default(0.1),
  /** Readings per second. Absent: the recipe's `monitor.sampleRateHz`. */
  sampleRateHz: positive.max(10000).optional(),
  /** Linear drift of the detector gain with run time, percent per hour (gain 1 at t = 0). Default 0.5. */
  gainDriftPercentPerHour: finite.min(-100).max(100).default(0.5),
  /** Linear drift of the detector offset with run time, percent of full scale per hour. Default 0.05. */
  offsetDriftPercentPerHour: finite.min(-100).max(100).default(0.05),
  /** Mean number of spikes per hour (a Poisson process); a spike hits the first reading after it. Default 0. */
  spikeRatePerHour: nonNegative.max(36000).default(0),
  /** Height of a spike, percent of full scale; its sign is random. Default 2. */
  spikePercent: nonNegative.max(100).default(2),
  /** Gaps in the optical readings at set times. Default none. */
  dropouts: z.array(DropoutSchema).default([]),
  /** Mean number of random gaps per hour (a Poisson process on the time between gaps). Default 0. */
  dropoutRatePerHour: nonNegative.max(3600).default(0),
  /** Length of each random gap, s. Default 2. */
  dropoutDurationS: positive.max(3600).default(2),
  /**
   * Sample once per revolution of the substrate holder instead of at `sampleRateHz`: one reading
   * every 60/revolutionsPerMinute s from t = 0.
   */
  perRevolution: z.strictObject({ revolutionsPerMinute: positive.max(6000) }).optional(),
});
export type OpticalSettings = z.infer<typeof OpticalSettingsSchema>;

export const CrystalSettingsSchema = z.strictObject({
  /** rms of the white frequency noise of one reading, Hz. Default 0.05. */
  noiseHz: nonNegative.max(1000).default(0.05),
  /** Readings per second. Absent: the recipe's `crystal.sampleRateHz`. */
  sampleRateHz: positive.max(1000).optional(),
  /**
   * Thermal shift of the frequency at full heat load, Hz (+ = the frequency rises, an apparent
   * loss of mass). The heat load h(t) rises toward 1 while any shutter is open and relaxes toward
   * 0 while all are closed, first order: dh/dt = (u − h)/τ, u = 1 or 0. Default 3.
   */
  temperatureShiftHz: finite.min(-10000).max(10000).default(3),
  /** τ of the heat load, s; 0 = the shift follows the shutters at once. Default 30. */
  temperatureTimeConstantS: nonNegative.max(86400).default(30),
  /** A jump of the frequency that stays from `atS` on (a mode hop). Default none. */
  modeHop: z.strictObject({ atS: nonNegative, jumpHz: finite }).optional(),
  /**
   * The crystal stops oscillating (no more readings) when its used life,
   * (f_bare − f)/(f_bare − f_min usable), reaches this fraction; 1 = never within the run. Default 1.
   */
  failAtLifeFraction: finite.gt(0).max(1).default(1),
});
export type CrystalSettings = z.infer<typeof CrystalSettingsSchema>;

/** The spectrophotometer that measures the finished parts (`fringe simulate --measured-out`). */
export const SpectrophotometerSettingsSchema = z.strictObject({
  /** rms of the white noise of one measured point, percent (of T or R, 0–100 %). Default 0.2. */
  noisePercent: nonNegative.max(20).default(0.2),
});
export type SpectrophotometerSettings = z.infer<typeof SpectrophotometerSettingsSchema>;

/**
 * A spectrometer on the witness chip (issue 15): a spectrum of the chip's T or R (the monitor
 * layer's signal and angle) on a grid of its own, every 1/rate s. Each value is
 * g(t)·(S + s)/(1 + s) + o(t) + ε: S the true spectrum averaged over the slit, s the stray light
 * (light reaching the detector whatever the chip passes, in the reference frame too; common
 * practice, no source), g and o the baseline's linear drifts, ε white noise per wavelength.
 */
export const SpectralMonitorSettingsSchema = z.strictObject({
  /** The instrument's wavelengths, nm: `fromNm`, `fromNm + stepNm`, … up to `toNm`. Default 400–900 nm in 2 nm steps. */
  grid: z
    .strictObject({ fromNm: positive, toNm: positive, stepNm: positive })
    .refine((g) => g.toNm > g.fromNm, { path: ['toNm'], message: 'must be above fromNm' })
    .refine((g) => (g.toNm - g.fromNm) / g.stepNm < 16_384, { path: ['stepNm'], message: 'gives more than 16384 wavelengths' })
    .default({ fromNm: 400, toNm: 900, stepNm: 2 }),
  /** Spectra per second. Default 5. */
  rateHz: positive.max(1000).default(5),
  /** rms of the white noise of one value, percent of full scale. Default 0.2. */
  noisePercent: nonNegative.max(20).default(0.2),
  /** Linear drift of the gain with run time, percent per hour (gain 1 at t = 0). Default 0.5. */
  gainDriftPercentPerHour: finite.min(-100).max(100).default(0.5),
  /** Linear drift of the offset with run time, percent of full scale per hour. Default 0.05. */
  offsetDriftPercentPerHour: finite.min(-100).max(100).default(0.05),
  /** Stray light s, percent of the reference level. Default 0.1. */
  strayLightPercent: nonNegative.max(50).default(0.1),
  /** FWHM of the triangular slit function, nm; 0: the value at each wavelength itself. Default 3. */
  resolutionNm: nonNegative.max(100).default(3),
  /** How the chamber writes them: `table` (SPW header, SPC lines) or `json` (one object a line). Default table. */
  form: z.enum(['table', 'json']).default('table'),
});
export type SpectralMonitorSettings = z.infer<typeof SpectralMonitorSettingsSchema>;

export const SimProfileSchema = z.strictObject({
  formatVersion: z.literal(1),
  name: z.string().min(1),
  description: z.string().optional(),
  /** Per source: `default`, and entries named by material that override it field by field. */
  sources: z.object({ default: SourceSettingsSchema.prefault({}) }).catchall(SourceOverrideSchema).prefault({}),
  /** Per material: `default`, and entries named by material that override it field by field. */
  materials: z.object({ default: MaterialSettingsSchema.prefault({}) }).catchall(MaterialOverrideSchema).prefault({}),
  optical: OpticalSettingsSchema.prefault({}),
  crystal: CrystalSettingsSchema.prefault({}),
  spectrophotometer: SpectrophotometerSettingsSchema.prefault({}),
  /** A spectral monitor on the witness chip; absent: none. */
  spectral: SpectralMonitorSettingsSchema.optional(),
});
export type SimProfile = z.infer<typeof SimProfileSchema>;

/** Reads, validates and freezes a profile file; throws ConfigError listing every violation. */
export function loadSimProfile(file: string): SimProfile {
  return loadConfigFile(SimProfileSchema, file);
}

/** The source knobs for `material`: its entry over `default`, field by field. */
export function sourceSettingsFor(profile: SimProfile, material: string): SourceSettings {
  return overlay(profile.sources.default, material === 'default' ? undefined : profile.sources[material]);
}

/** The material knobs for `material`: its entry over `default`, field by field. */
export function materialSettingsFor(profile: SimProfile, material: string): MaterialSettings {
  return overlay(profile.materials.default, material === 'default' ? undefined : profile.materials[material]);
}

function overlay<T extends object>(base: T, entry: { [K in keyof T]?: T[K] | undefined } | undefined): T {
  const out = { ...base };
  if (entry) for (const [key, value] of Object.entries(entry)) if (value !== undefined) (out as Record<string, unknown>)[key] = value;
  return out;
}
