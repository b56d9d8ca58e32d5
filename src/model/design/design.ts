/**
 * A design: incident medium, substrate, and layers in deposition order (layer 1 on the
 * substrate), each a material with a physical thickness or a number of quarter-waves.
 * The schema is the single declaration of the file format; `resolveDesign` binds it to the
 * material library and yields the stack the optics kernel evaluates.
 */
import { z } from 'zod';
import { indexAt, type Dispersion } from '../optics/dispersion.ts';
import type { MaterialLibrary } from '../optics/material.ts';
import type { StackSpec } from '../optics/optical-model.ts';
import { expandShorthand } from './shorthand.ts';
import { ToleranceSchema, type Tolerance } from './tolerances.ts';

const positive = z.number().finite().positive();

/** A material by its library name, or an inline constant index. */
export const MediumRefSchema = z.union([
  z.string().min(1),
  z.strictObject({ n: positive, k: z.number().finite().nonnegative().default(0) }),
]);
export type MediumRef = z.infer<typeof MediumRefSchema>;

export const DesignLayerSchema = z
  .strictObject({
    material: MediumRefSchema,
    /** Physical thickness in nm. */
    thicknessNm: positive.optional(),
    /** Optical thickness in quarter-waves at `atNm` (default: the design's reference wavelength). */
    quarterWaves: positive.optional(),
    atNm: positive.optional(),
  })
  .refine((l) => (l.thicknessNm === undefined) !== (l.quarterWaves === undefined), {
    message: 'give exactly one of thicknessNm or quarterWaves',
  });

export const DesignSchema = z
  .strictObject({
    formatVersion: z.literal(1),
    name: z.string().min(1),
    description: z.string().optional(),
    /** The medium light comes from (lossless); default air. */
    incident: MediumRefSchema.default('Air'),
    substrate: z.strictObject({
      material: MediumRefSchema,
      thicknessMm: positive.default(1),
      /** `incoherent`: a real part with a bare back face; `none`: the substrate is semi-infinite. */
      back: z.enum(['incoherent', 'none']).default('incoherent'),
    }),
    /** The medium behind the substrate; default: the incident medium. */
    exit: MediumRefSchema.optional(),
    /** Wavelength of the quarter-waves, nm. Required when any layer is given in quarter-waves. */
    referenceWavelengthNm: positive.optional(),
    /** The band the design is for (default range of `fringe spectrum`). */
    band: z
      .strictObject({ fromNm: positive, toNm: positive })
      .refine((b) => b.fromNm < b.toNm, { message: 'fromNm must be below toNm' })
      .optional(),
    /** Absent or empty (with no shorthand either): the bare substrate, for `fringe spectrum`; a recipe refuses it. */
    layers: z.array(DesignLayerSchema).optional(),
    /** Textbook shorthand such as `(HL)^7 H`, read in deposition order; symbols name materials. */
    shorthand: z
      .strictObject({
        formula: z.string().min(1),
        symbols: z.record(z.string().regex(/^[A-Za-z]$/, 'a symbol is one letter'), MediumRefSchema),
      })
      .optional(),
    /** What the customer's specification asks of the spectrum (the study's yield counts runs meeting every one). */
    tolerances: z.array(ToleranceSchema).default([]),
  })
  .refine((d) => d.layers === undefined || d.shorthand === undefined, {
    message: 'give the layers either as `layers` or as `shorthand`, not both (neither: the bare substrate)',
  });

export type Design = z.infer<typeof DesignSchema>;

/** A layer with everything resolved. */
export interface ResolvedLayer {
  /** 1 = the layer on the substrate. */
  number: number;
  /** Library name, or a label such as `n=2.35` for an inline index. */
  materialName: string;
  thicknessNm: number;
  /** Real index at the reference wavelength (NaN when the design has none). */
  nAtReference: number;
  /** Quarter-waves at the reference wavelength (NaN when the design has none). */
  quarterWaves: number;
}

export interface ResolvedDesign {
  name: string;
  stack: StackSpec;
  layers: ResolvedLayer[];
  incidentName: string;
  substrateName: string;
  referenceWavelengthNm: number | undefined;
  band: { fromNm: number; toNm: number } | undefined;
  tolerances: readonly Tolerance[];
}

export type ResolveResult =
  | { ok: true; design: ResolvedDesign }
  | { ok: false; violations: { at: string; message: string }[] };

/** Names every design may use without the library: n = 1 exactly (the 0.03 % of air is neglected). */
const BUILT_IN: Record<string, Dispersion> = {
  Air: Object.freeze({ model: 'constant', n: 1, k: 0 }),
  Vacuum: Object.freeze({ model: 'constant', n: 1, k: 0 }),
};

/**
 * Binds a validated design to the material library. Every unknown material and every
 * impossible thickness is reported at once, with the nearest known names.
 */
export function resolveDesign(
  design: Design,
  library: MaterialLibrary,
  suggest: (name: string, known: string[]) => string[],
): ResolveResult {
  const violations: { at: string; message: string }[] = [];
  const inline = new Map<string, Dispersion>();
  const known = [...Object.keys(BUILT_IN), ...Object.keys(library.materials)];

  const medium = (ref: MediumRef, at: string): { name: string; dispersion: Dispersion } | undefined => {
    if (typeof ref !== 'string') {
      const name = ref.k === 0 ? `n=${ref.n}` : `n=${ref.n},k=${ref.k}`;
      let d = inline.get(name);
      if (!d) {
        d = { model: 'constant', n: ref.n, k: ref.k };
        inline.set(name, d);
      }
      return { name, dispersion: d };
    }
    const d = Object.hasOwn(BUILT_IN, ref) ? BUILT_IN[ref] : Object.hasOwn(library.materials, ref) ? library.materials[ref]?.dispersion : undefined;
    if (d) return { name: ref, dispersion: d };
    const near = suggest(ref, known);
    violations.push({
      at,
      message: `unknown material "${ref}"; ${near.length > 0 ? `nearest known: ${near.join(', ')}` : 'no known name is near it (fringe materials lists the library)'}`,
    });
    return undefined;
  };

  const realIndexAt = (ref: MediumRef, d: Dispersion, wavelengthNm: number, at: string): number => {
    const name = typeof ref === 'string' ? ref : undefined;
    const entry = name === undefined ? undefined : library.materials[name];
    if (name !== undefined && entry && (wavelengthNm < entry.validRangeNm[0] || wavelengthNm > entry.validRangeNm[1])) {
      violations.push({
        at,
        message: `${wavelengthNm} nm is outside the data range of ${name} (${entry.validRangeNm[0]}–${entry.validRangeNm[1]} nm)`,
      });
      return Number.NaN;
    }
    return indexReal(d, wavelengthNm);
  };

  const incident = medium(design.incident, 'incident');
  const substrate = medium(design.substrate.material, 'substrate.material');
  const exit = design.exit === undefined ? incident : medium(design.exit, 'exit');
  const ref = design.referenceWavelengthNm;

  // Layers as (material reference, thickness spec, path for messages).
  const specs: {
    ref: MediumRef;
    thicknessNm?: number;
    quarterWaves?: number;
    atNm?: number;
    at: string;
    materialAt: string;
  }[] = [];
  if (design.layers) {
    design.layers.forEach((l, i) => {
      specs.push({
        ref: l.material,
        at: `layers[${i}]`,
        materialAt: `layers[${i}].material`,
        ...(l.thicknessNm !== undefined ? { thicknessNm: l.thicknessNm } : {}),
        ...(l.quarterWaves !== undefined ? { quarterWaves: l.quarterWaves } : {}),
        ...(l.atNm !== undefined ? { atNm: l.atNm } : {}),
      });
    });
  } else if (design.shorthand) {
    const expanded = expandShorthand(design.shorthand.formula);
    if (!expanded.ok) {
      violations.push({
        at: 'shorthand.formula',
        message: `${expanded.message} at character ${expanded.offset + 1} of "${design.shorthand.formula}"`,
      });
    } else {
      for (const l of expanded.layers) {
        const bound = design.shorthand.symbols[l.symbol];
        if (bound === undefined) {
          violations.push({ at: 'shorthand.symbols', message: `the formula uses "${l.symbol}", which symbols does not bind to a material` });
          break;
        }
        const at = `shorthand.symbols.${l.symbol}`;
        specs.push({ ref: bound, quarterWaves: l.quarterWaves, at, materialAt: at });
      }
    }
  }

  const layers: ResolvedLayer[] = [];
  const stackLayers: { dispersion: Dispersion; thicknessNm: number }[] = [];
  for (const [i, spec] of specs.entries()) {
    const m = medium(spec.ref, spec.materialAt);
    if (!m) continue;
    let thicknessNm = spec.thicknessNm ?? Number.NaN;
    if (spec.quarterWaves !== undefined) {
      const at = spec.atNm ?? ref;
      if (at === undefined) {
        violations.push({ at: spec.at, message: 'quarter-waves need referenceWavelengthNm (or atNm on the layer)' });
        continue;
      }
      const n = realIndexAt(spec.ref, m.dispersion, at, spec.at);
      // Quarter-wave optical thickness: n·d = λ/4 per quarter-wave (normal incidence).
      thicknessNm = (spec.quarterWaves * at) / (4 * n);
    }
    const nRef = ref === undefined ? Number.NaN : indexReal(m.dispersion, ref);
    layers.push({
      number: i + 1,
      materialName: m.name,
      thicknessNm,
      nAtReference: nRef,
      quarterWaves: ref === undefined ? Number.NaN : (4 * nRef * thicknessNm) / ref,
    });
    stackLayers.push({ dispersion: m.dispersion, thicknessNm });
  }
  // A tolerance must lie where every medium of the part has data, or it could not be judged.
  design.tolerances.forEach((t, i) => {
    const refs: MediumRef[] = [design.incident, design.substrate.material, ...(design.exit === undefined ? [] : [design.exit]), ...specs.map((s) => s.ref)];
    for (const ref of new Set(refs.filter((r): r is string => typeof r === 'string'))) {
      const range = library.materials[ref]?.validRangeNm;
      if (range && (t.fromNm < range[0] || t.toNm > range[1])) {
        violations.push({
          at: `tolerances[${i}]`,
          message: `${t.fromNm}–${t.toNm} nm reaches outside the data of ${ref} (${range[0]}–${range[1]} nm), so the tolerance could not be judged there`,
        });
        break;
      }
    }
  });
  if (violations.length > 0 || !incident || !substrate || !exit) {
    // A shorthand repeats its layers: report each distinct problem once.
    const seen = new Set<string>();
    return { ok: false, violations: violations.filter((v) => !seen.has(v.at + v.message) && seen.add(v.at + v.message)) };
  }
  const incoherent = design.substrate.back === 'incoherent';
  return {
    ok: true,
    design: {
      name: design.name,
      stack: {
        incident: incident.dispersion,
        layers: stackLayers,
        substrate: substrate.dispersion,
        back: incoherent ? 'incoherent' : 'semi-infinite',
        ...(incoherent ? { substrateThicknessNm: design.substrate.thicknessMm * 1e6 } : {}),
        exit: exit.dispersion,
      },
      layers,
      incidentName: incident.name,
      substrateName: substrate.name,
      referenceWavelengthNm: ref,
      band: design.band,
      tolerances: design.tolerances,
    },
  };
}

function indexReal(d: Dispersion, wavelengthNm: number): number {
  return indexAt({ n: 0, k: 0 }, d, wavelengthNm).n;
}
