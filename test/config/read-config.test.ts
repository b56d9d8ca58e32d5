// Reading configuration files: whatever a file holds (bad aliases, an alias bomb, binary bytes,
// several documents, deep nesting, a folder or a pipe), the reader gives a value or refuses the
// file in one sentence naming it and the line; the command line prints that sentence and exits 1.
import { spawnSync } from 'node:child_process';
import { mkdirSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { runCli as run } from '../support/run-cli.ts';
import { MAX_CONFIG_BYTES, MAX_CONFIG_DEPTH, MAX_CONFIG_VALUES, parseYamlText, readYamlFile } from '../../src/config/read-config.ts';
import { ConfigError, validate } from '../../src/config/validation.ts';
import { z } from 'zod';

const root = fileURLToPath(new URL('../../', import.meta.url));
const dir = mkdtempSync(join(tmpdir(), 'fringe-read-config-'));
let fileCount = 0;

function fileWith(content: string | Uint8Array, name = `file-${++fileCount}.yaml`): string {
  const file = join(dir, name);
  writeFileSync(file, content);
  return file;
}

/** The refusal of `read()`: a ConfigError with one violation. */
function refusal(read: () => unknown): { at: string; message: string; text: string } {
  let caught: unknown;
  try {
    read();
  } catch (error) {
    caught = error;
  }
  expect(caught).toBeInstanceOf(ConfigError);
  const error = caught as ConfigError;
  expect(error.violations).toHaveLength(1);
  const [violation] = error.violations as [{ at: string; message: string }];
  return { ...violation, text: error.message };
}

/** Nine lists of nine, each of the list before: 9⁹ ≈ 387 million strings once expanded. */
const aliasBomb = ['a: &a ["lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol", "lol"]']
  .concat(['b', 'c', 'd', 'e', 'f', 'g', 'h', 'i'].map((name, i) => `${name}: &${name} [${Array(9).fill(`*${String.fromCharCode(97 + i)}`).join(', ')}]`))
  .join('\n');

describe('readYamlFile: aliases', () => {
  it('refuses an alias that names no anchor, with its line and column', () => {
    const file = fileWith('name: test\nsubstrate: *undefined\n');
    const r = refusal(() => readYamlFile(file));
    expect(r.at).toBe('line 2, column 12');
    expect(r.message).toBe('the alias *undefined names no anchor &undefined before it');
    expect(r.text).toBe(`${file}: line 2, column 12: the alias *undefined names no anchor &undefined before it`);
  });

  it('refuses an alias used before its anchor', () => {
    const r = refusal(() => parseYamlText('a: *later\nb: &later 1\n', 'early.yaml'));
    expect(r.at).toBe('line 1, column 4');
    expect(r.message).toMatch(/alias \*later names no anchor/);
  });

  it('refuses an alias inside the value it names (a loop), and one looping through a redefined anchor', () => {
    expect(refusal(() => parseYamlText('a: &x [1, [*x]]\n', 'loop.yaml'))).toMatchObject({ at: 'line 1, column 12', message: 'the alias *x is inside the value it names (a loop)' });
    // The second &x is the one *x names, and *x lies inside it.
    expect(refusal(() => parseYamlText('a: &x 1\nb: &x { c: *x }\n', 'loop.yaml'))).toMatchObject({ at: 'line 2, column 12' });
  });

  it('refuses an alias bomb at the alias that crosses the limit, without building it', () => {
    const r = refusal(() => parseYamlText(aliasBomb, 'bomb.yaml'));
    expect(r.message).toBe(`its aliases expand to more than ${MAX_CONFIG_VALUES} values (an alias bomb?)`);
    // 9 + 81 + 729 + 6561 + 59049 values are under the limit; the list on line 6 crosses it.
    expect(r.at).toMatch(/^line 6, column \d+$/);
  });

  it('refuses nesting made deep by aliases', () => {
    const half = MAX_CONFIG_DEPTH / 2 + 1;
    const text = `a: &a ${'['.repeat(half)}1${']'.repeat(half)}\nb: ${'['.repeat(half)}*a${']'.repeat(half)}\n`;
    expect(refusal(() => parseYamlText(text, 'deep.yaml'))).toMatchObject({ at: `line 2, column ${4 + half}`, message: `nests more than ${MAX_CONFIG_DEPTH} levels deep (aliases expanded)` });
  });

  it('still reads ordinary aliases: one anchor used 500 times, a redefined anchor, a shared mapping', () => {
    const many = `source: &memory from memory\nlist: [${Array(500).fill('*memory').join(', ')}]\n`;
    const value = parseYamlText(many, 'many.yaml') as { list: string[] };
    expect(value.list).toHaveLength(500);
    expect(value.list.every((v) => v === 'from memory')).toBe(true);
    expect(parseYamlText('a: &x 1\nb: &x 2\nc: *x\n', 'redefined.yaml')).toEqual({ a: 1, b: 2, c: 2 });
    expect(parseYamlText('base: &base { rate: 0.3, tooling: 1.1 }\nTiO2: *base\nSiO2: [*base, *base]\n', 'shared.yaml')).toEqual({
      base: { rate: 0.3, tooling: 1.1 },
      TiO2: { rate: 0.3, tooling: 1.1 },
      SiO2: [
        { rate: 0.3, tooling: 1.1 },
        { rate: 0.3, tooling: 1.1 },
      ],
    });
  });
});

describe('readYamlFile: files that are not one YAML document', () => {
  it('refuses a folder, a missing file, a path through a file and a pipe', () => {
    const folder = join(dir, 'a-folder.yaml');
    mkdirSync(folder);
    expect(refusal(() => readYamlFile(folder)).text).toBe(`${folder}: cannot be read: it is a folder`);
    expect(refusal(() => readYamlFile(join(dir, 'missing.yaml'))).message).toBe('cannot be read: no such file');
    const plain = fileWith('a: 1\n');
    expect(refusal(() => readYamlFile(join(plain, 'inside.yaml'))).message).toBe('cannot be read: a folder on its path is a file');
    // A pipe with no writer would block the reader for ever.
    const fifo = join(dir, 'pipe.yaml');
    expect(spawnSync('mkfifo', [fifo]).status).toBe(0);
    expect(refusal(() => readYamlFile(fifo)).message).toBe('cannot be read: it is not a regular file');
  });

  it('refuses a file larger than the limit before reading it', () => {
    const big = fileWith(Buffer.alloc(MAX_CONFIG_BYTES + 1, 0x20));
    expect(refusal(() => readYamlFile(big)).message).toBe('cannot be read: it is larger than 8 MiB, too large for a configuration file');
  });

  it('refuses binary bytes: invalid UTF-8 and control characters, with the line', () => {
    const invalid = fileWith(Buffer.concat([Buffer.from('a: 1\nb: 2\nc: '), Buffer.from([0xff, 0xfe, 0x00, 0x81]), Buffer.from('\n')]));
    expect(refusal(() => readYamlFile(invalid))).toMatchObject({ at: 'line 3', message: 'is not UTF-8 text (a binary file?)' });
    const nul = fileWith(Buffer.from('a: 1\nb: x\u0000y\n'));
    expect(refusal(() => readYamlFile(nul))).toMatchObject({ at: 'line 2', message: 'holds the control character U+0000, which is not text (a binary file?)' });
  });

  it('refuses an empty file and one with only comments', () => {
    expect(refusal(() => readYamlFile(fileWith(''))).message).toBe('the file is empty (or holds only comments)');
    expect(refusal(() => readYamlFile(fileWith('# nothing yet\n\n'))).message).toBe('the file is empty (or holds only comments)');
  });

  it('reads a file that starts with a byte order mark as if it had none', () => {
    expect(readYamlFile(fileWith('\uFEFFname: marked\nvalue: 2\n'))).toEqual({ name: 'marked', value: 2 });
  });

  it('refuses duplicate keys at the second one', () => {
    expect(refusal(() => parseYamlText('name: a\nvalue: 1\nname: b\n', 'dup.yaml'))).toMatchObject({ at: 'line 3, column 1', message: 'Map keys must be unique' });
  });

  it('refuses a stream of several documents at the second, in words of its own', () => {
    const r = refusal(() => parseYamlText('name: a\n---\nname: b\n---\nname: c\n', 'stream.yaml'));
    expect(r.at).toBe('line 2, column 1');
    expect(r.message).toBe('a second YAML document starts here; a configuration file holds one document (remove the "---" line)');
  });

  it('refuses nesting deeper than the limit at the first level too deep; reads the limit itself', () => {
    const nest = (levels: number) => `a: ${'['.repeat(levels - 1)}1${']'.repeat(levels - 1)}\n`;
    expect(() => parseYamlText(nest(MAX_CONFIG_DEPTH), 'ok.yaml')).not.toThrow();
    expect(refusal(() => parseYamlText(nest(MAX_CONFIG_DEPTH + 1), 'deep.yaml'))).toMatchObject({ at: `line 1, column ${3 + MAX_CONFIG_DEPTH}`, message: `nests more than ${MAX_CONFIG_DEPTH} levels deep` });
    // Deep enough to overflow the YAML parser's own stack.
    expect(refusal(() => parseYamlText(`a: ${'['.repeat(20_000)}${']'.repeat(20_000)}\n`, 'deeper.yaml')).message).toMatch(/^nests (too deeply to read|more than 64 levels deep)/);
    // Line n opens the n-th mapping, indented 2(n − 1).
    const blockMapping = Array.from({ length: 100 }, (_, i) => `${'  '.repeat(i)}k${i}:`).join('\n');
    expect(refusal(() => parseYamlText(`${blockMapping} 1\n`, 'mapping.yaml')).at).toBe(`line ${MAX_CONFIG_DEPTH + 1}, column ${2 * MAX_CONFIG_DEPTH + 1}`);
  });

  it('refuses a key that is a mapping or a list, written out or by alias, without a warning from the YAML library', async () => {
    const warnings: string[] = [];
    const onWarning = (warning: Error): void => void warnings.push(warning.message);
    process.on('warning', onWarning);
    try {
      expect(refusal(() => parseYamlText('name: a\n? [x, y]\n: 1\n', 'key.yaml'))).toMatchObject({ at: 'line 2, column 3', message: 'a key is a mapping or a list; keys are plain names' });
      expect(refusal(() => parseYamlText('a: &m { b: 1 }\n*m : 2\n', 'key.yaml'))).toMatchObject({ at: 'line 2, column 1' });
      expect(refusal(() => parseYamlText('{ { b: 1 }: 2 }\n', 'key.yaml')).message).toBe('a key is a mapping or a list; keys are plain names');
      // Node emits warnings on a later tick.
      await new Promise((resolve) => setImmediate(resolve));
    } finally {
      process.off('warning', onWarning);
    }
    expect(warnings).toEqual([]);
  });

  it('reports one syntax error, the first, not its echoes', () => {
    const r = refusal(() => parseYamlText('a: [1, 2\nb: "open\nc: }\n', 'syntax.yaml'));
    expect(r.text.split('\n')).toHaveLength(1);
    expect(r.at).toMatch(/^line \d+, column \d+$/);
  });
});

describe('validate', () => {
  it('names the first 8 unknown keys of many and counts the rest, in one line', () => {
    const stray = Object.fromEntries(Array.from({ length: 20 }, (_, i) => [`stray${i}`, i]));
    const r = refusal(() => validate(z.strictObject({}), stray, 'stray.yaml'));
    expect(r.message).toBe(`unknown keys ${Array.from({ length: 8 }, (_, i) => `"stray${i}"`).join(', ')} and 12 more (a typo?)`);
  });
});

describe('the command line refuses bad configuration files in one sentence', () => {
  const recipe = join(root, 'config/recipes/ar4-visible.yaml');
  const cases: Array<[string, (file: string) => string[]]> = [
    ['a design (spectrum)', (file) => ['spectrum', file]],
    ['a recipe (plan)', (file) => ['plan', file]],
    ['a material library (plan --materials)', (file) => ['plan', recipe, '--materials', file]],
    ['a simulator profile (simulate --profile)', (file) => ['simulate', recipe, '--profile', file]],
    ['a chamber file (run --chamber)', (file) => ['run', recipe, '--chamber', file]],
  ];
  const bad: Array<[string, string, RegExp]> = [
    ['an alias to no anchor', 'formatVersion: 1\nname: *undefined\n', /: line 2, column 7: the alias \*undefined names no anchor &undefined before it$/],
    ['an alias bomb', aliasBomb, /: line 6, column \d+: its aliases expand to more than 100000 values \(an alias bomb\?\)$/],
    ['a looping alias', 'formatVersion: 1\nname: &n [*n]\n', /: line 2, column 11: the alias \*n is inside the value it names \(a loop\)$/],
  ];
  for (const [kind, argv] of cases) {
    for (const [what, text, expected] of bad) {
      it(`${kind} with ${what}`, async () => {
        const file = fileWith(text);
        const r = await run(...argv(file));
        expect(r.code).toBe(1);
        expect(r.out).toBe('');
        const lines = r.err.trimEnd().split('\n');
        expect(lines, r.err).toHaveLength(1);
        expect(lines[0]).toContain(file);
        expect(lines[0]).toMatch(expected);
      });
    }
  }
});

describe('reading arbitrary input', () => {
  /** Any outcome but a value or a one-sentence ConfigError naming the file fails the property. */
  function readsOrRefusesInOneSentence(read: () => unknown, file: string): void {
    try {
      read();
    } catch (error) {
      if (!(error instanceof ConfigError)) throw error;
      expect(error.violations).toHaveLength(1);
      expect(error.message).not.toContain('\n');
      expect(error.message.startsWith(`${file}: `)).toBe(true);
    }
  }

  const yamlPieces = fc.constantFrom(
    ...['&a ', '&b ', '*a', '*b', '*c', '[', ']', '{', '}', ': ', ', ', '- ', '? ', '\n', '\n  ', '\n    ', '---\n', '...\n', 'name', '1', '-2.5e3', '"q', "'s'", '!!str ', '!!binary ', '!tag ', '#c', '|\n', '>\n', '<<: ', '~', '\t', '%YAML 1.2\n', '%YAML 1.1\n', '!!set ', '!!omap ', '!!timestamp ', '!!int ', '!!float ', '.inf', '.nan', '0x1F', '\uFEFF', '\r\n', 'é', '\u0000'],
  );

  it('random YAML-like text gives a value or one sentence', () => {
    fc.assert(
      fc.property(fc.array(yamlPieces, { maxLength: 60 }), (pieces) => readsOrRefusesInOneSentence(() => parseYamlText(pieces.join(''), 'random.yaml'), 'random.yaml')),
      { numRuns: 1500 },
    );
  });

  it('random text gives a value or one sentence', () => {
    fc.assert(
      fc.property(fc.string({ unit: 'binary', maxLength: 200 }), (text) => readsOrRefusesInOneSentence(() => parseYamlText(text, 'text.yaml'), 'text.yaml')),
      { numRuns: 500 },
    );
  });

  it('random bytes in a file give a value or one sentence', () => {
    const file = join(dir, 'bytes.yaml');
    fc.assert(
      fc.property(fc.uint8Array({ maxLength: 200 }), (bytes) => {
        writeFileSync(file, bytes);
        readsOrRefusesInOneSentence(() => readYamlFile(file), file);
      }),
      { numRuns: 300 },
    );
  });

  it('the shipped configuration files still read', () => {
    for (const name of ['config/materials.yaml', 'config/recipes/edge-longpass-visible.yaml', 'config/sim/typical.yaml', 'config/chambers/sim-tcp.yaml']) {
      const value = readYamlFile(join(root, name));
      expect(value, name).toBeTypeOf('object');
      expect(readFileSync(join(root, name), 'utf8').length).toBeGreaterThan(0);
    }
  });
});
