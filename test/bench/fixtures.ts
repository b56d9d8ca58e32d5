/** Recipes the benchmarks share: built in code so that their size is exact. */
import { loadMaterialLibrary, resolveDesignData } from '../../src/config/load-design.ts';
import { validate } from '../../src/config/validation.ts';
import { RecipeSchema, resolveRecipe, type ResolvedRecipe } from '../../src/model/plan/recipe.ts';

/**
 * 40 alternating TiO2/SiO2 layers of non-quarter-wave thicknesses (a fixed pseudo-random
 * sequence, 40–160 nm) on N-BK7, level cuts at 600 nm, a chip change at layer 21.
 */
export function recipe40(): ResolvedRecipe {
  const library = loadMaterialLibrary();
  let seed = 12345;
  const next = (): number => {
    seed = (seed * 1103515245 + 12345) % 2147483648;
    return seed / 2147483648;
  };
  const layers = Array.from({ length: 40 }, (_, i) => ({
    material: i % 2 === 0 ? 'TiO2' : 'SiO2',
    thicknessNm: Math.round((40 + 120 * next()) * 100) / 100,
  }));
  const designData = { formatVersion: 1, name: 'bench 40', substrate: { material: 'N-BK7' }, referenceWavelengthNm: 600, layers };
  const design = resolveDesignData(designData, library, 'bench-40');
  const recipe = validate(
    RecipeSchema,
    {
      formatVersion: 1,
      name: 'bench 40 layers',
      design: designData,
      process: { TiO2: { rateNmPerS: 0.25 }, SiO2: { rateNmPerS: 0.7 } },
      chips: [{ fromLayer: 1 }, { fromLayer: 21 }],
      defaults: { wavelengthNm: 600, cut: 'level', bandwidthNm: 2 },
    },
    'bench-40',
  );
  const result = resolveRecipe(recipe, design, library);
  if (!result.ok) throw new Error(result.violations.map((v) => `${v.at}: ${v.message}`).join('; '));
  return result.recipe;
}
