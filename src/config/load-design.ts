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
  return resolveDesignData(readYamlFile(file), library, file);
}
