/** Loading a recipe and the design it names, refused with every problem listed. */
import { dirname, resolve } from 'node:path';
import type { MaterialLibrary } from '../model/optics/material.ts';
import { RecipeSchema, resolveRecipe, type ResolvedRecipe } from '../model/plan/recipe.ts';
import { loadDesign, loadMaterialLibrary, resolveDesignData } from './load-design.ts';
import { readYamlFile } from './read-config.ts';
import { ConfigError, validate } from './validation.ts';

export function loadRecipe(file: string, library: MaterialLibrary = loadMaterialLibrary()): ResolvedRecipe {
  const recipe = validate(RecipeSchema, readYamlFile(file), file);
  const design =
    typeof recipe.design === 'string'
      ? loadDesign(resolve(dirname(file), recipe.design), library)
      : resolveDesignData(recipe.design, library, `${file} (design)`);
  const result = resolveRecipe(recipe, design, library);
  if (!result.ok) throw new ConfigError(file, result.violations);
  return result.recipe;
}
