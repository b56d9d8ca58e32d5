/**
 * Reading YAML or JSON configuration files. Whatever a file holds, the reader returns a value or
 * throws a {@link ConfigError} with one sentence naming the file (and the line where there is
 * one): never another exception, never a hang. Aliases, nesting and size are bounded before the
 * value is built, because everything downstream (validation, freezing, the journal's copy of a
 * recipe) walks the value with aliases expanded.
 */
import { readFileSync, statSync } from 'node:fs';
import { isAlias, isCollection, isPair, isScalar, LineCounter, parseDocument, type Document } from 'yaml';
import type { z } from 'zod';
import { ConfigError, validate } from './validation.ts';

/** Largest file read, bytes: configuration is text of a few kB. */
export const MAX_CONFIG_BYTES = 8 * 1024 * 1024;
/** Deepest nesting of mappings and lists, aliases expanded (a recipe needs about 5). */
export const MAX_CONFIG_DEPTH = 64;
/** Most values (scalars, mappings, lists) in a file with its aliases expanded. */
export const MAX_CONFIG_VALUES = 100_000;

/** Reads and parses a YAML (or JSON, which is YAML) file; throws {@link ConfigError}. */
export function readYamlFile(file: string): unknown {
  const refuse = (message: string, at = ''): never => {
    throw new ConfigError(file, [{ at, message }]);
  };
  let bytes: Buffer;
  try {
    const stat = statSync(file);
    if (stat.isDirectory()) return refuse('cannot be read: it is a folder');
    // A pipe or a device could block or never end.
    if (!stat.isFile()) return refuse('cannot be read: it is not a regular file');
    if (stat.size > MAX_CONFIG_BYTES) return refuse(`cannot be read: it is larger than ${MAX_CONFIG_BYTES / 1024 / 1024} MiB, too large for a configuration file`);
    bytes = readFileSync(file);
  } catch (error) {
    if (error instanceof ConfigError) throw error;
    const code = (error as NodeJS.ErrnoException).code;
    const why =
      code === 'ENOENT' ? 'no such file' : code === 'EACCES' || code === 'EPERM' ? 'permission denied' : code === 'ENOTDIR' ? 'a folder on its path is a file' : firstLine(error);
    return refuse(`cannot be read: ${why}`);
  }
  return parseYamlText(decodeText(bytes, file), file);
}

/** The bytes as UTF-8 text, or a {@link ConfigError} saying where they stop being text. */
function decodeText(bytes: Buffer, file: string): string {
  let text: string;
  try {
    text = new TextDecoder('utf-8', { fatal: true }).decode(bytes);
  } catch {
    const lossy = bytes.toString('utf8');
    const at = lossy.indexOf('\uFFFD');
    throw new ConfigError(file, [{ at: at >= 0 ? `line ${lineOf(lossy, at)}` : '', message: 'is not UTF-8 text (a binary file?)' }]);
  }
  return text;
}

/** 1-based line of `offset` in `text`. */
function lineOf(text: string, offset: number): number {
  let line = 1;
  for (let i = text.indexOf('\n'); i >= 0 && i < offset; i = text.indexOf('\n', i + 1)) line++;
  return line;
}

/** Index of the first C0 control character other than tab, LF and CR (or DEL), else −1. */
function firstControlCharacter(text: string): number {
  for (let i = 0; i < text.length; i++) {
    const c = text.charCodeAt(i);
    if ((c < 0x20 && c !== 0x09 && c !== 0x0a && c !== 0x0d) || c === 0x7f) return i;
  }
  return -1;
}

/** Parses configuration text; throws {@link ConfigError} naming `file`. */
export function parseYamlText(text: string, file: string): unknown {
  const refuse = (message: string, at = ''): never => {
    throw new ConfigError(file, [{ at, message }]);
  };
  const lines = new LineCounter();
  const position = (offset: number | undefined): string => {
    if (offset === undefined) return '';
    const { line, col } = lines.linePos(offset);
    return `line ${line}, column ${col}`;
  };
  // Control characters other than tab and line ends are not text: YAML would keep them in strings.
  const control = firstControlCharacter(text);
  if (control >= 0) {
    const code = text.charCodeAt(control).toString(16).toUpperCase().padStart(4, '0');
    refuse(`holds the control character U+${code}, which is not text (a binary file?)`, `line ${lineOf(text, control)}`);
  }
  let doc: Document.Parsed;
  try {
    doc = parseDocument(text, { prettyErrors: true, uniqueKeys: true, lineCounter: lines, logLevel: 'error' });
  } catch (error) {
    return refuse(yamlFailure(error));
  }
  const first = doc.errors[0];
  if (first) {
    // Only the first: later syntax errors mostly follow from it.
    const pos = first.linePos?.[0];
    const at = pos ? `line ${pos.line}, column ${pos.col}` : '';
    if (first.code === 'MULTIPLE_DOCS') refuse('a second YAML document starts here; a configuration file holds one document (remove the "---" line)', at);
    if (/call stack/i.test(first.message)) refuse(`nests too deeply to read (at most ${MAX_CONFIG_DEPTH} levels)`, at);
    refuse((first.message.split('\n')[0] ?? first.message).replace(/ at line \d+, column \d+:?$/, ''), at);
  }
  // A lone "---" parses as a null scalar written as nothing: that file is as empty as a blank one.
  if (doc.contents === null || (isScalar(doc.contents) && doc.contents.value === null && doc.contents.source === '')) refuse('the file is empty (or holds only comments)');
  const problem = checkShape(doc);
  if (problem) refuse(problem.message, position(problem.offset));
  try {
    return doc.toJS({ maxAliasCount: MAX_CONFIG_VALUES }) as unknown;
  } catch (error) {
    return refuse(yamlFailure(error));
  }
}

/** One sentence for an exception from the YAML library (a guard that {@link checkShape} should make unreachable). */
function yamlFailure(error: unknown): string {
  if (error instanceof RangeError && /call stack/i.test(error.message)) return `nests too deeply to read (at most ${MAX_CONFIG_DEPTH} levels)`;
  if (error instanceof ReferenceError && /alias/i.test(error.message)) return `its aliases expand to too many values (an alias bomb?)`;
  return `cannot be read as YAML: ${firstLine(error)}`;
}

function firstLine(error: unknown): string {
  const message = error instanceof Error ? error.message : String(error);
  return message.split('\n')[0] ?? message;
}

interface Extent {
  /** Values with aliases expanded. */
  values: number;
  /** Nesting levels with aliases expanded. */
  depth: number;
}

/**
 * Walks the parsed document once, in document order (the order in which YAML resolves an alias
 * to the last anchor of its name before it), and returns the first problem: a key that is a
 * mapping or a list, an alias with no anchor before it, an alias inside the node it names (a loop), nesting deeper than
 * {@link MAX_CONFIG_DEPTH} or more than {@link MAX_CONFIG_VALUES} values once aliases are
 * expanded. Iterative, so a deep file cannot overflow the stack here.
 */
function checkShape(doc: Document.Parsed): { message: string; offset: number | undefined } | undefined {
  type Frame = { node: unknown; children: unknown[]; next: number; extent: Extent };
  const anchors = new Map<string, unknown>();
  const extents = new Map<unknown, Extent>();
  const open = new Set<unknown>();
  let total = 0;
  const stack: Frame[] = [];
  const offsetOf = (node: unknown): number | undefined => (node as { range?: [number, number, number] | null }).range?.[0];
  /** Mappings and lists enclosing the next node. */
  const levels = (): number => stack.reduce((n, f) => (isPair(f.node) ? n : n + 1), 0);

  const enter = (node: unknown): { message: string; offset: number | undefined } | undefined => {
    if (node === null || typeof node !== 'object') return undefined;
    if (isAlias(node)) {
      const target = anchors.get(node.source);
      if (target === undefined) return { message: `the alias *${node.source} names no anchor &${node.source} before it`, offset: offsetOf(node) };
      if (open.has(target)) return { message: `the alias *${node.source} is inside the value it names (a loop)`, offset: offsetOf(node) };
      const extent = extents.get(target) as Extent;
      total += extent.values;
      if (total > MAX_CONFIG_VALUES) return { message: `its aliases expand to more than ${MAX_CONFIG_VALUES} values (an alias bomb?)`, offset: offsetOf(node) };
      addTo(stack.at(-1), extent);
      if (levels() + extent.depth > MAX_CONFIG_DEPTH) return { message: `nests more than ${MAX_CONFIG_DEPTH} levels deep (aliases expanded)`, offset: offsetOf(node) };
      return undefined;
    }
    const anchor = (node as { anchor?: string }).anchor;
    if (anchor !== undefined) {
      anchors.set(anchor, node);
      open.add(node);
    }
    if (isScalar(node)) {
      total += 1;
      if (total > MAX_CONFIG_VALUES) return { message: `holds more than ${MAX_CONFIG_VALUES} values`, offset: offsetOf(node) };
      const extent = { values: 1, depth: 0 };
      if (anchor !== undefined) {
        extents.set(node, extent);
        open.delete(node);
      }
      addTo(stack.at(-1), extent);
      return undefined;
    }
    if (isPair(node)) {
      // Such a key would reach the schema as its YAML text; say what is wrong instead.
      const key = isAlias(node.key) ? anchors.get(node.key.source) : node.key;
      if (isCollection(key)) return { message: 'a key is a mapping or a list; keys are plain names', offset: offsetOf(node.key) };
      stack.push({ node, children: [node.key, node.value], next: 0, extent: { values: 0, depth: 0 } });
      return undefined;
    }
    if (isCollection(node)) {
      total += 1;
      if (total > MAX_CONFIG_VALUES) return { message: `holds more than ${MAX_CONFIG_VALUES} values`, offset: offsetOf(node) };
      if (levels() + 1 > MAX_CONFIG_DEPTH) return { message: `nests more than ${MAX_CONFIG_DEPTH} levels deep`, offset: offsetOf(node) };
      stack.push({ node, children: [...node.items], next: 0, extent: { values: 1, depth: 1 } });
    }
    return undefined;
  };

  const first = enter(doc.contents);
  if (first) return first;
  while (stack.length > 0) {
    const frame = stack.at(-1) as Frame;
    if (frame.next < frame.children.length) {
      const problem = enter(frame.children[frame.next++]);
      if (problem) return problem;
      continue;
    }
    stack.pop();
    if (open.has(frame.node)) {
      open.delete(frame.node);
      extents.set(frame.node, frame.extent);
    }
    addTo(stack.at(-1), frame.extent);
  }
  return undefined;
}

/** Adds a finished child's extent to its parent frame (a pair adds no level of its own). */
function addTo(parent: { node: unknown; extent: Extent } | undefined, child: Extent): void {
  if (!parent) return;
  parent.extent.values += child.values;
  parent.extent.depth = Math.max(parent.extent.depth, child.depth + (isPair(parent.node) ? 0 : 1));
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
