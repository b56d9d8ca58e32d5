// Every kind of configuration file through its real loader: a shipped file, parsed, mutated
// (a key dropped, a value of another type, numbers out of range or not finite, strings that look
// like numbers, long strings, extra keys), written back as YAML and loaded. The loader returns a
// valid object or refuses with a ConfigError that names the file and the path of a field that
// was changed; it never throws anything else.
import { mkdtempSync, readdirSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { parse, stringify } from 'yaml';
import { loadChamber } from '../../drivers/chamber.ts';
import { loadSimProfile } from '../../sim/index.ts';
import { loadDesign, loadMaterialLibrary } from '../../src/config/load-design.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { ConfigError, formatPath } from '../../src/config/validation.ts';
import { fuzz, FUZZ_TIMEOUT_MS } from './fuzz-runs.ts';

const CONFIG = fileURLToPath(new URL('../../config/', import.meta.url));
const shipped = (folder: string): { name: string; data: unknown }[] =>
  readdirSync(join(CONFIG, folder))
    .filter((name) => name.endsWith('.yaml'))
    .map((name) => ({ name, data: parse(readFileSync(join(CONFIG, folder, name), 'utf8')) as unknown }));

type Path = (string | number)[];
type Mutation = { kind: 'drop' | 'replace' | 'extra'; path: Path; value?: unknown; key?: string };

/** Values a careless edit or a hostile file might put anywhere. */
const nasty = fc.oneof(
  fc.constantFrom<unknown>(null, true, false, 0, -1, -0, 1.5, 1e308, -1e308, 5e-324, 1e21, 2 ** 53 + 1, Number.NaN, Number.POSITIVE_INFINITY, Number.NEGATIVE_INFINITY),
  fc.constantFrom<unknown>('', ' ', 'NaN', 'nan', '.nan', 'Infinity', '-inf', '1e3', '0x10', '12 nm', 'ünïcödé', '../../../etc/passwd', '__proto__', 'x'.repeat(5000)),
  fc.constantFrom<unknown>([], {}, [1, 2, 3], { a: 1 }, [[]], { __proto__: 1 }),
  fc.double(),
  fc.integer(),
  fc.string({ maxLength: 20 }),
);

/** Every path to a value inside `data` (the root excluded). */
function pathsIn(data: unknown, prefix: Path = [], out: Path[] = []): Path[] {
  if (data === null || typeof data !== 'object') return out;
  for (const [k, v] of Object.entries(data)) {
    const path = [...prefix, Array.isArray(data) ? Number(k) : k];
    out.push(path);
    pathsIn(v, path, out);
  }
  return out;
}

/** Paths to mappings (the root included), where an extra key can go. */
function objectPaths(data: unknown): Path[] {
  return [[], ...pathsIn(data)].filter((p) => {
    const v = valueAt(data, p);
    return v !== null && typeof v === 'object' && !Array.isArray(v);
  });
}

/** 1–3 mutations of `data`, as choices among its own paths. */
function mutationsOf(data: unknown): fc.Arbitrary<Mutation[]> {
  const paths = pathsIn(data);
  const objects = objectPaths(data);
  const one: fc.Arbitrary<Mutation> = fc.oneof(
    fc.constantFrom(...paths).map((path): Mutation => ({ kind: 'drop', path })),
    fc.tuple(fc.constantFrom(...paths), nasty).map(([path, value]): Mutation => ({ kind: 'replace', path, value })),
    fc.tuple(fc.constantFrom(...objects), fc.oneof(fc.constantFrom('extra', 'formatversion', 'Name', 'layer', 'rate'), fc.string({ minLength: 1, maxLength: 12 })), nasty).map(
      ([path, key, value]): Mutation => ({ kind: 'extra', path, key, value }),
    ),
  );
  return fc.array(one, { minLength: 1, maxLength: 3 });
}

function apply(data: unknown, mutations: readonly Mutation[]): unknown {
  const copy = structuredClone(data);
  let root: unknown = copy;
  for (const m of mutations) {
    const parentPath = m.kind === 'extra' ? m.path : m.path.slice(0, -1);
    let parent: unknown = root;
    for (const k of parentPath) parent = parent === null || typeof parent !== 'object' ? undefined : (parent as Record<string | number, unknown>)[k];
    // An earlier mutation may have removed or replaced the way there.
    if (parent === null || typeof parent !== 'object') continue;
    const key = m.kind === 'extra' ? (m.key as string) : (m.path.at(-1) as string | number);
    const holder = parent as Record<string | number, unknown>;
    if (m.kind === 'drop') {
      if (Array.isArray(holder) && typeof key === 'number') holder.splice(key, 1);
      else delete holder[key];
    } else if (m.kind === 'replace' && parentPath.length === 0 && root === copy && m.path.length === 0) {
      root = structuredClone(m.value);
    } else {
      // A copy: the generator hands out the same constant objects again, which must stay as they are.
      Object.defineProperty(holder, key, { value: structuredClone(m.value), enumerable: true, writable: true, configurable: true });
    }
  }
  return root;
}

/** True when a violation at `at` concerns the field at `path` (itself, inside it, or the mapping holding it). */
function concerns(at: string, path: string): boolean {
  if (at === path) return true;
  const inside = (outer: string, inner: string): boolean => outer === '' || inner.startsWith(`${outer}.`) || inner.startsWith(`${outer}[`);
  return inside(at, path) || inside(path, at);
}

/** The JSON type of a value, telling lists from mappings. */
const typeOf = (v: unknown): string => (v === null ? 'null' : Array.isArray(v) ? 'list' : typeof v);

/**
 * Writes `data` as YAML to `file`, loads it, and checks the outcome: an object, or a ConfigError
 * naming `file`, every violation with its place. When the one change was a value of another type
 * or an extra key, a violation must name that field (or one inside it, or the mapping holding
 * it): a consistency rule may name another field too, but a type error is the field's own.
 */
function loadsOrNamesTheField(file: string, original: unknown, mutations: readonly Mutation[], load: (file: string) => unknown, otherFiles: (m: Mutation) => boolean = () => false): void {
  writeFileSync(file, stringify(apply(original, mutations), { aliasDuplicateObjects: false }));
  let caught: unknown;
  try {
    load(file);
    return;
  } catch (error) {
    caught = error;
  }
  if (!(caught instanceof ConfigError)) throw new Error(`the loader threw ${String(caught)} for mutations ${JSON.stringify(mutations)}`, { cause: caught });
  // A change to a reference to another file may be refused by that file's reading.
  if (caught.file !== file && mutations.some(otherFiles)) return;
  expect(caught.file).toBe(file);
  expect(caught.message.startsWith(file)).toBe(true);
  expect(caught.violations.length).toBeGreaterThan(0);
  for (const v of caught.violations) expect(v.message.trim()).not.toBe('');
  const [only] = mutations;
  if (mutations.length !== 1 || only === undefined || only.kind === 'drop') return;
  if (only.kind === 'replace' && typeOf(valueAt(original, only.path)) === typeOf(only.value)) return;
  const touched = formatPath(only.path);
  const named = caught.violations.map((v) => v.at);
  expect(
    named.some((at) => concerns(at, touched)),
    `violations at ${JSON.stringify(named)} do not name ${JSON.stringify(touched)}: ${caught.message}`,
  ).toBe(true);
}

function valueAt(data: unknown, path: Path): unknown {
  return path.reduce<unknown>((v, k) => (v === null || typeof v !== 'object' ? undefined : (v as Record<string | number, unknown>)[k]), data);
}

const library = loadMaterialLibrary();

describe('configuration files, mutated, through their loaders', () => {
  const dir = mkdtempSync(join(tmpdir(), 'fringe-fuzz-config-'));
  const fileNamed = (name: string): string => join(dir, name);

  /** The property over every shipped file of one kind. */
  const overShipped = (family: string, folder: string, load: (file: string) => unknown, adjust: (data: unknown) => unknown = (d) => d, otherFiles?: (m: Mutation) => boolean): void => {
    const files = shipped(folder).map((f) => ({ ...f, data: adjust(f.data) }));
    const cases = fc.oneof(...files.map((f) => mutationsOf(f.data).map((mutations) => ({ f, mutations }))));
    const file = fileNamed(`${folder}.yaml`);
    fuzz(
      `config: ${family}`,
      fc.property(cases, ({ f, mutations }) => loadsOrNamesTheField(file, f.data, mutations, load, otherFiles)),
    );
  };

  it('recipes', () => {
    // The temporary recipe names the shipped design by its full path.
    const adjust = (data: unknown): unknown => {
      const recipe = data as { design: unknown };
      return typeof recipe.design === 'string' ? { ...recipe, design: join(CONFIG, 'recipes', recipe.design) } : recipe;
    };
    overShipped('recipes', 'recipes', (file) => loadRecipe(file, library), adjust, (m) => m.path[0] === 'design');
  }, FUZZ_TIMEOUT_MS);

  it('designs', () => {
    overShipped('designs', 'designs', (file) => loadDesign(file, library));
  }, FUZZ_TIMEOUT_MS);

  it('chambers', () => {
    overShipped('chambers', 'chambers', loadChamber);
  }, FUZZ_TIMEOUT_MS);

  it('simulator profiles', () => {
    overShipped('simulator profiles', 'sim', loadSimProfile);
  }, FUZZ_TIMEOUT_MS);

  it('the material library', () => {
    // One entry of each dispersion model (Cauchy, tabulated, Sellmeier) from the shipped library:
    // the whole library costs 20 ms a case to write and read, and its other entries add no shape.
    const whole = parse(readFileSync(join(CONFIG, 'materials.yaml'), 'utf8')) as { materials: Record<string, unknown> };
    const data = { ...whole, materials: Object.fromEntries(['SiO2', 'TiO2', 'Al', 'N-BK7'].map((name) => [name, whole.materials[name]])) };
    expect(Object.values(data.materials)).not.toContain(undefined);
    const file = fileNamed('materials.yaml');
    fuzz(
      'config: materials',
      fc.property(mutationsOf(data), (mutations) => loadsOrNamesTheField(file, data, mutations, loadMaterialLibrary)),
    );
  }, FUZZ_TIMEOUT_MS);
});
