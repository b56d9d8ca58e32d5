/**
 * A recipe: a design plus how to run it — process rates, the witness chips, the optical
 * monitor, the crystal, and the cut of every layer. The schema is the file format;
 * `resolveRecipe` binds it to the design and the material library.
 */
import { z } from 'zod';
import { DesignSchema, MediumRefSchema, type MediumRef, type ResolvedDesign } from '../design/design.ts';
import type { Dispersion } from '../optics/dispersion.ts';
import type { MaterialLibrary } from '../optics/material.ts';

const positive = z.number().finite().positive();
const nonNegative = z.number().finite().nonnegative();

/** How a layer is ended. `auto`: `turning-point` when the layer ends on one, else `level`. */
export const CutModeSchema = z.enum(['auto', 'turning-point', 'level', 'crystal', 'time']);
export type CutModeSetting = z.infer<typeof CutModeSchema>;
export type CutMode = Exclude<CutModeSetting, 'auto'>;

/** Per-layer monitoring settings; every field falls back to the recipe's `defaults`. */
export const LayerSettingsSchema = z.strictObject({
  cut: CutModeSchema.optional(),
  /** Monitor wavelength, nm (default: the design's reference wavelength). */
  wavelengthNm: positive.optional(),
  signal: z.enum(['transmission', 'reflection']).optional(),
  /** Angle of the monitor beam on the chip, degrees. */
  angleDeg: z.number().finite().min(0).max(80).optional(),
  /** Full width at half maximum of the monitor's (triangular) pass band, nm. */
  bandwidthNm: nonNegative.optional(),
  /** Time from the cut command to the shutter being closed, s. */
  shutterDelayS: nonNegative.optional(),
  /** Turning-point cuts: how far past the extremum to cut, as a fraction of the layer's swing. */
  overshootFraction: nonNegative.max(0.5).optional(),
});
export type LayerSettings = z.infer<typeof LayerSettingsSchema>;

export const ProcessSchema = z.strictObject({
  /** Deposition rate on the parts, nm/s. */
  rateNmPerS: positive,
  /** Chip thickness / part thickness for this material (1 = the chip sees what the parts see). */
  chipRatio: positive.default(1),
  /** Tooling factor: part thickness / crystal thickness, as a fraction (1 = 100 %). */
  toolingFactor: positive.default(1),
  /** Rate band for alerts: allowed deviation from the planned rate, percent. */
  rateBandPercent: positive.default(10),
});

export const ChipSchema = z.strictObject({
  /** The first layer (1-based, deposition order) deposited on this chip; it starts bare. */
  fromLayer: z.number().int().min(1),
  /** Default: the design's substrate material. */
  substrate: MediumRefSchema.optional(),
  thicknessMm: positive.default(1),
  back: z.enum(['incoherent', 'none']).default('incoherent'),
  label: z.string().optional(),
});

const layerKey = z.string().regex(/^\d+(-\d+)?$/, 'a layer number such as "7" or a range such as "3-9"');

export const RecipeSchema = z
  .strictObject({
    formatVersion: z.literal(1),
    name: z.string().min(1),
    description: z.string().optional(),
    /** A design file (path relative to the recipe) or the design itself. */
    design: z.union([z.string().min(1), DesignSchema]),
    /** Process settings per material; `default` applies to materials not listed. */
    process: z.record(z.string(), ProcessSchema).default({}),
    monitor: z
      .strictObject({
        /** Wavelengths the optical monitor can use, nm. */
        rangeNm: z.tuple([positive, positive]).default([400, 1000]),
        /** rms noise of one reading, percent of full scale (for the plan's precision). */
        noisePercent: positive.default(0.1),
        /** Readings per second. */
        sampleRateHz: positive.default(10),
      })
      .default({ rangeNm: [400, 1000], noisePercent: 0.1, sampleRateHz: 10 }),
    crystal: z
      .strictObject({
        /** Frequency of the bare crystal, Hz. */
        bareFrequencyHz: positive.default(6e6),
        /** Below this frequency the crystal is spent, Hz. */
        minUsableFrequencyHz: positive.default(5.5e6),
        /** rms noise of one frequency reading, Hz. */
        noiseHz: positive.default(0.05),
        sampleRateHz: positive.default(10),
        /** rms uncertainty of the tooling factor, percent: what limits a crystal cut on the parts. */
        toolingSigmaPercent: nonNegative.default(1),
      })
      .default({ bareFrequencyHz: 6e6, minUsableFrequencyHz: 5.5e6, noiseHz: 0.05, sampleRateHz: 10, toolingSigmaPercent: 1 }),
    chips: z.array(ChipSchema).min(1).default([{ fromLayer: 1, thicknessMm: 1, back: 'incoherent' }]),
    /**
     * After each layer, re-optimise the layers still to come (within ±boundsPercent of the design)
     * so that the spectrum over the design's band stays closest to the design's.
     */
    compensation: z
      .strictObject({
        enabled: z.boolean().default(true),
        boundsPercent: positive.max(50).default(10),
        quantity: z.enum(['R', 'T']).default('T'),
        stepNm: positive.default(5),
      })
      .optional(),
    defaults: LayerSettingsSchema.default({}),
    /** Per-layer settings by layer number or range, e.g. `"1": {cut: turning-point}`, `"4-9": {...}`. */
    layers: z.record(layerKey, LayerSettingsSchema).default({}),
  })
  .refine((r) => r.monitor.rangeNm[0] < r.monitor.rangeNm[1], {
    message: 'monitor.rangeNm must be [shortest, longest]',
    path: ['monitor', 'rangeNm'],
  })
  .refine((r) => r.crystal.minUsableFrequencyHz < r.crystal.bareFrequencyHz, {
    message: 'crystal.minUsableFrequencyHz must lie below bareFrequencyHz',
    path: ['crystal', 'minUsableFrequencyHz'],
  });

export type Recipe = z.infer<typeof RecipeSchema>;

/** Defaults where neither the layer nor the recipe says (common practice, no source). */
export const LAYER_DEFAULTS = {
  cut: 'auto',
  signal: 'transmission',
  angleDeg: 0,
  bandwidthNm: 2,
  shutterDelayS: 0.2,
  overshootFraction: 0,
} as const;

/** A rate for materials the recipe does not list (common practice for e-beam oxides, no source). */
export const DEFAULT_RATE_NM_PER_S = 0.5;

export interface ResolvedChip {
  index: number;
  label: string;
  fromLayer: number;
  /** Last layer on this chip (inclusive). */
  toLayer: number;
  substrateName: string;
  substrate: Dispersion;
  thicknessMm: number;
  back: 'incoherent' | 'none';
  validRangeNm: readonly [number, number];
}

export interface LayerRecipe {
  number: number;
  materialName: string;
  dispersion: Dispersion;
  /** Design thickness on the parts, nm. */
  targetNm: number;
  cutSetting: CutModeSetting;
  wavelengthNm: number;
  signal: 'transmission' | 'reflection';
  angleDeg: number;
  bandwidthNm: number;
  shutterDelayS: number;
  overshootFraction: number;
  rateNmPerS: number;
  rateBandPercent: number;
  chipRatio: number;
  toolingFactor: number;
  densityGPerCm3: number;
  zRatio: number;
  chip: number;
  /** Wavelengths the material's data cover, nm. */
  validRangeNm: readonly [number, number];
}

export interface ResolvedRecipe {
  name: string;
  design: ResolvedDesign;
  layers: LayerRecipe[];
  chips: ResolvedChip[];
  monitor: Recipe['monitor'];
  crystal: Recipe['crystal'];
  incident: Dispersion;
  compensation?: NonNullable<Recipe['compensation']>;
}

export type RecipeResult =
  | { ok: true; recipe: ResolvedRecipe }
  | { ok: false; violations: { at: string; message: string }[] };

/**
 * Binds a validated recipe to its (already resolved) design and the library. Reports every
 * problem at once: layer keys beyond the design, chips out of order, unknown materials,
 * monitor wavelengths outside a material's data.
 */
export function resolveRecipe(recipe: Recipe, design: ResolvedDesign, library: MaterialLibrary): RecipeResult {
  const violations: { at: string; message: string }[] = [];
  const count = design.layers.length;
  if (count === 0) {
    return { ok: false, violations: [{ at: 'design', message: 'the design has no layers, a bare substrate: a recipe deposits at least one (the bare substrate is for fringe spectrum)' }] };
  }

  // Per-layer settings: the defaults, then the widest ranges down to single layers, so the most
  // specific entry wins (an object's key order cannot carry the order written).
  const perLayer: LayerSettings[] = Array.from({ length: count }, () => ({ ...recipe.defaults }));
  const span = (key: string): number => {
    const [a, b] = key.split('-').map(Number) as [number, number | undefined];
    return (b ?? a) - a;
  };
  const entries = Object.entries(recipe.layers).sort(([x], [y]) => span(y) - span(x));
  for (const [key, settings] of entries) {
    const [a, b] = key.split('-').map(Number) as [number, number | undefined];
    const last = b ?? a;
    if (a < 1 || last > count || last < a) {
      violations.push({ at: `layers.${key}`, message: `the design has layers 1–${count}; "${key}" is not among them` });
      continue;
    }
    for (let n = a; n <= last; n++) Object.assign(perLayer[n - 1] as LayerSettings, stripUndefined(settings));
  }

  const chips: ResolvedChip[] = [];
  recipe.chips.forEach((chip, i) => {
    const previous = chips[chips.length - 1];
    if (i === 0 && chip.fromLayer !== 1) {
      violations.push({ at: 'chips[0].fromLayer', message: `the first chip must start at layer 1, found ${chip.fromLayer}` });
    }
    if (previous && chip.fromLayer <= previous.fromLayer) {
      violations.push({ at: `chips[${i}].fromLayer`, message: `chips must start at increasing layers; ${chip.fromLayer} follows ${previous.fromLayer}` });
    }
    if (chip.fromLayer > count) {
      violations.push({ at: `chips[${i}].fromLayer`, message: `the design has ${count} layers; a chip cannot start at ${chip.fromLayer}` });
    }
    const ref: MediumRef = chip.substrate ?? design.substrateName;
    const dispersion = lookup(ref, library, design);
    if (!dispersion) {
      violations.push({ at: `chips[${i}].substrate`, message: `unknown material "${typeof ref === 'string' ? ref : `n=${ref.n}`}"` });
      return;
    }
    if (previous) previous.toLayer = chip.fromLayer - 1;
    chips.push({
      index: i,
      label: chip.label ?? `chip ${i + 1}`,
      fromLayer: chip.fromLayer,
      toLayer: count,
      substrateName: typeof ref === 'string' ? ref : `n=${ref.n}`,
      substrate: dispersion,
      thicknessMm: chip.thicknessMm,
      back: chip.back,
      validRangeNm: rangeOf(ref, library),
    });
  });

  for (const name of Object.keys(recipe.process)) {
    if (name !== 'default' && !design.layers.some((l) => l.materialName === name)) {
      violations.push({ at: `process.${name}`, message: `the design has no layer of "${name}"` });
    }
  }

  const [monitorLo, monitorHi] = recipe.monitor.rangeNm;
  const layers: LayerRecipe[] = design.layers.map((layer, i) => {
    const s = perLayer[i] as LayerSettings;
    const process = recipe.process[layer.materialName] ?? recipe.process.default;
    const material = library.materials[layer.materialName];
    const wavelengthNm = s.wavelengthNm ?? design.referenceWavelengthNm ?? (monitorLo + monitorHi) / 2;
    const chip = chips.findLastIndex((c) => c.fromLayer <= layer.number);
    // The monitor sees the chip's substrate and every layer on it across its whole pass band.
    const bandwidthNm = s.bandwidthNm ?? LAYER_DEFAULTS.bandwidthNm;
    const [bandLo, bandHi] = [wavelengthNm - bandwidthNm, wavelengthNm + bandwidthNm];
    const onChip = chips[chip];
    const seen = design.layers.slice((onChip?.fromLayer ?? 1) - 1, i + 1).map((l) => ({ materialName: l.materialName, validRangeNm: rangeOf(l.materialName, library) }));
    const outside = monitorBandProblem(wavelengthNm, bandwidthNm, onChip, seen);
    if (outside) {
      const { name, rangeNm: [lo, hi] } = outside;
      violations.push({
        at: `layers.${layer.number}.wavelengthNm`,
        message: `the monitor's band ${bandLo}–${bandHi} nm reaches outside the data of ${name} (${lo}–${hi} nm) on this layer's chip`,
      });
    }
    return {
      number: layer.number,
      materialName: layer.materialName,
      dispersion: (design.stack.layers[i] as { dispersion: Dispersion }).dispersion,
      targetNm: layer.thicknessNm,
      cutSetting: s.cut ?? LAYER_DEFAULTS.cut,
      wavelengthNm,
      signal: s.signal ?? LAYER_DEFAULTS.signal,
      angleDeg: s.angleDeg ?? LAYER_DEFAULTS.angleDeg,
      bandwidthNm: s.bandwidthNm ?? LAYER_DEFAULTS.bandwidthNm,
      shutterDelayS: s.shutterDelayS ?? LAYER_DEFAULTS.shutterDelayS,
      overshootFraction: s.overshootFraction ?? LAYER_DEFAULTS.overshootFraction,
      rateNmPerS: process?.rateNmPerS ?? DEFAULT_RATE_NM_PER_S,
      rateBandPercent: process?.rateBandPercent ?? 10,
      chipRatio: process?.chipRatio ?? 1,
      toolingFactor: process?.toolingFactor ?? 1,
      // Inline indices have no acoustic data: treat them as matched (Z = 1) at a silica-like density.
      densityGPerCm3: material?.densityGPerCm3 ?? 2.2,
      zRatio: material?.zRatio ?? 1,
      chip: Math.max(0, chip),
      validRangeNm: rangeOf(layer.materialName, library),
    };
  });
  if (recipe.compensation?.enabled && !design.band) {
    violations.push({ at: 'compensation', message: 'compensation needs the design band (band: {fromNm, toNm} in the design)' });
  }
  if (violations.length > 0) return { ok: false, violations };
  return {
    ok: true,
    recipe: {
      name: recipe.name,
      design,
      layers,
      chips,
      monitor: recipe.monitor,
      crystal: recipe.crystal,
      incident: design.stack.incident,
      ...(recipe.compensation ? { compensation: recipe.compensation } : {}),
    },
  };
}

/**
 * The first medium whose data the monitor's pass band (wavelength ± bandwidth) reaches outside
 * of — the chip's substrate, then the layers on the chip up to the one monitored — or undefined
 * when the band lies inside them all. The validator and the wavelength search share it, so that
 * a suggested wavelength is always one a recipe may name.
 */
export function monitorBandProblem(
  wavelengthNm: number,
  bandwidthNm: number,
  chip: Pick<ResolvedChip, 'substrateName' | 'validRangeNm'> | undefined,
  layersOnChip: readonly Pick<LayerRecipe, 'materialName' | 'validRangeNm'>[],
): { name: string; rangeNm: readonly [number, number] } | undefined {
  const [bandLo, bandHi] = [wavelengthNm - bandwidthNm, wavelengthNm + bandwidthNm];
  const media = [...(chip ? [{ name: chip.substrateName, rangeNm: chip.validRangeNm }] : []), ...layersOnChip.map((l) => ({ name: l.materialName, rangeNm: l.validRangeNm }))];
  return media.find(({ rangeNm: [lo, hi] }) => bandLo < lo || bandHi > hi);
}

function lookup(ref: MediumRef, library: MaterialLibrary, design: ResolvedDesign): Dispersion | undefined {
  if (typeof ref !== 'string') return { model: 'constant', n: ref.n, k: ref.k };
  if (ref === design.substrateName) return design.stack.substrate;
  return library.materials[ref]?.dispersion;
}

function rangeOf(ref: MediumRef, library: MaterialLibrary): readonly [number, number] {
  const entry = typeof ref === 'string' ? library.materials[ref] : undefined;
  return entry ? entry.validRangeNm : [0, Number.POSITIVE_INFINITY];
}

function stripUndefined<T extends object>(o: T): Partial<T> {
  return Object.fromEntries(Object.entries(o).filter(([, v]) => v !== undefined)) as Partial<T>;
}
