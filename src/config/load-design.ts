/** Loading the material library and designs from files, refused with every problem listed. */
import { fileURLToPath } from 'node:url';
import { DesignSchema, resolveDesign, type ResolvedDesign } from '../model/design/design.ts';
import { MaterialLibrarySchema, type MaterialLibrary } from '../model/optics/material.ts';
import { loadConfigFile, readYamlFile } from './read-config.ts';
import { ConfigError, nearestNames, validate } from './validation.ts';

/** The library shipped with fringe. */
export const DEFAULT_MATERIALS_FILE = fileURLToPath(new URL('../../config/materials.yaml', import.meta.url));

export function loadMaterialLibrary(file: string = DEFAULT_MATERIALS_FILE): MaterialLibrary {
  return loadConfigFile(MaterialLibrarySchema, file);
}

/** Validates a parsed design object (from a file or a request body) and binds it to the library. */
export function resolveDesignData(data: unknown, library: MaterialLibrary, file: string): ResolvedDesign {
  const design = validate(DesignSchema, data, file);
  const result = resolveDesign(design, library, nearestNames);
  if (!result.ok) throw new ConfigError(file, result.violations);
  return result.design;
}

export function loadDesign(file: string, library: MaterialLibrary = loadMaterialLibrary()): ResolvedDesign {
  const data = readYamlFile(file);
  if (looksLikeRecipe(data)) {
    const named = typeof data.design === 'string' ? ` (its \`design:\` names ${data.design})` : ' (its design is written inside it, under `design:`)';
    throw new ConfigError(file, [
      { at: '', message: `this is a recipe, not a design: plan, simulate, study, run and demo take a recipe; \`fringe spectrum\` takes the design it names${named}` },
    ]);
  }
  return resolveDesignData(data, library, file);
}

const isRecord = (value: unknown): value is Record<string, unknown> => typeof value === 'object' && value !== null && !Array.isArray(value);

/** A parsed file with a design's own keys and no recipe's: given where a recipe was expected, it is said so. */
export function looksLikeDesign(data: unknown): boolean {
  return isRecord(data) && !('design' in data) && ('substrate' in data || 'shorthand' in data || Array.isArray(data.layers));
}

/** A parsed file with a recipe's own keys: given where a design was expected, it is said so. */
export function looksLikeRecipe(data: unknown): data is Record<string, unknown> {
  return isRecord(data) && 'design' in data && !('substrate' in data);
}
