/**
 * The material library's schema: optical constants plus what the crystal monitor needs.
 * One declaration gives the validator, the TypeScript type and the JSON Schema.
 */
import { z } from 'zod';
import { DispersionSchema, dispersionRangeNm } from './dispersion.ts';

const source = z.string().min(3, 'name the source, or write "from memory"');

export const MaterialSchema = z
  .strictObject({
    /** One line: what the material is and how it was made (e-beam, IAD, sputtered, bulk glass). */
    description: z.string().min(1),
    /** Thin films differ from bulk: `film` for deposited-layer constants, `bulk` for glass or crystal. */
    form: z.enum(['film', 'bulk']),
    dispersion: DispersionSchema,
    /** Wavelengths (nm) over which the dispersion data are valid; fringe refuses to go outside. */
    validRangeNm: z.tuple([z.number().positive(), z.number().positive()]),
    /** Density in g/cm³ (bulk, or film where stated in `sources.density`). */
    densityGPerCm3: z.number().positive(),
    /** Bulk shear modulus in GPa, from which `zRatio` is derived. */
    shearModulusGPa: z.number().positive(),
    /**
     * Acoustic impedance ratio Z = Z_quartz / Z_film = √(ρ_q μ_q / (ρ_f μ_f)) for the Lu–Lewis
     * Z-match (C. Lu and O. Lewis, J. Appl. Phys. 43, 4385 (1972)).
     */
    zRatio: z.number().positive(),
    sources: z.strictObject({ index: source, density: source, shearModulus: source }),
  })
  .refine((m) => m.validRangeNm[0] < m.validRangeNm[1], {
    message: 'validRangeNm must be [shortest, longest]',
    path: ['validRangeNm'],
  })
  .refine(
    (m) => {
      const [lo, hi] = dispersionRangeNm(m.dispersion);
      return m.validRangeNm[0] >= lo && m.validRangeNm[1] <= hi;
    },
    { message: 'validRangeNm reaches beyond the tabulated data', path: ['validRangeNm'] },
  );

export type Material = z.infer<typeof MaterialSchema>;

export const MaterialLibrarySchema = z.strictObject({
  formatVersion: z.literal(1),
  materials: z.record(z.string().regex(/^[A-Za-z][A-Za-z0-9_.-]*$/, 'material names are letters, digits, _ . -'), MaterialSchema),
});

export type MaterialLibrary = z.infer<typeof MaterialLibrarySchema>;
