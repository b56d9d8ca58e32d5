/** Reading YAML or JSON configuration files, with parse errors reported by line and column. */
import { readFileSync } from 'node:fs';
import { parseDocument } from 'yaml';
import type { z } from 'zod';
import { ConfigError, validate } from './validation.ts';

/** Reads and parses a YAML (or JSON, which is YAML) file; throws {@link ConfigError}. */
export function readYamlFile(file: string): unknown {
  let text: string;
  try {
    text = readFileSync(file, 'utf8');
  } catch (error) {
    const code = (error as NodeJS.ErrnoException).code;
    const why = code === 'ENOENT' ? 'no such file' : code === 'EISDIR' ? 'it is a folder' : (error as Error).message;
    throw new ConfigError(file, [{ at: '', message: `cannot be read: ${why}` }]);
  }
  return parseYamlText(text, file);
}

export function parseYamlText(text: string, file: string): unknown {
  const doc = parseDocument(text, { prettyErrors: true, uniqueKeys: true });
  if (doc.errors.length > 0) {
    throw new ConfigError(
      file,
      doc.errors.map((e) => {
        const pos = e.linePos?.[0];
        return { at: pos ? `line ${pos.line}, column ${pos.col}` : '', message: (e.message.split('\n')[0] ?? e.message).replace(/ at line \d+, column \d+:?$/, '') };
      }),
    );
  }
  return doc.toJS({ maxAliasCount: 100 }) as unknown;
}

/** Reads a file and validates it against `schema`, returning the frozen result. */
export function loadConfigFile<S extends z.ZodType>(schema: S, file: string): z.output<S> {
  return deepFreeze(validate(schema, readYamlFile(file), file));
}

export function deepFreeze<T>(value: T): T {
  if (value !== null && typeof value === 'object' && !Object.isFrozen(value)) {
    Object.freeze(value);
    for (const child of Object.values(value)) deepFreeze(child);
  }
  return value;
}
