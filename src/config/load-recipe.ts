/** Loading a recipe and the design it names, refused with every problem listed. */
import { dirname, resolve } from 'node:path';
import type { MaterialLibrary } from '../model/optics/material.ts';
import { RecipeSchema, resolveRecipe, type ResolvedRecipe } from '../model/plan/recipe.ts';
import { looksLikeDesign, loadDesign, loadMaterialLibrary, resolveDesignData } from './load-design.ts';
import { readYamlFile } from './read-config.ts';
import { ConfigError, validate } from './validation.ts';

export function loadRecipe(file: string, library: MaterialLibrary = loadMaterialLibrary()): ResolvedRecipe {
  const data = readYamlFile(file);
  // A design in a recipe's place would otherwise be refused for a dozen missing and unknown keys.
  if (looksLikeDesign(data)) {
    throw new ConfigError(file, [
      { at: '', message: 'this is a design, not a recipe: `fringe spectrum` takes a design; plan, simulate, study, run and demo take a recipe, which names its design under `design:`' },
    ]);
  }
  const recipe = validate(RecipeSchema, data, file);
  const design = typeof recipe.design === 'string' ? loadNamedDesign(file, recipe.design, library) : resolveDesignData(recipe.design, library, `${file} (design)`);
  const result = resolveRecipe(recipe, design, library);
  if (!result.ok) throw new ConfigError(file, result.violations);
  return result.recipe;
}

/** The design file a recipe names, its problems told as the recipe's `design:` key's: that is where the user looks. */
function loadNamedDesign(recipeFile: string, named: string, library: MaterialLibrary): ReturnType<typeof loadDesign> {
  const path = resolve(dirname(recipeFile), named);
  try {
    return loadDesign(path, library);
  } catch (error) {
    if (!(error instanceof ConfigError) || error.file !== path) throw error;
    const where = named === path ? `"${named}"` : `"${named}" (${path})`;
    throw new ConfigError(
      recipeFile,
      error.violations.map((v) => ({ at: 'design', message: `the design file ${where}${v.at === '' ? '' : `, ${v.at}`}: ${v.message}` })),
    );
  }
}
