/**
 * Turning schema violations into messages a person can act on: every violation at once, each
 * with the path of the bad field, what was expected and what was found.
 */
import type { z } from 'zod';

/** One violation: `at` is a dotted path such as `layers[3].thicknessNm`. */
export interface Violation {
  at: string;
  message: string;
}

/** A file that was refused; `violations` lists every problem found, not just the first. */
export class ConfigError extends Error {
  override name = 'ConfigError';
  constructor(
    readonly file: string,
    readonly violations: readonly Violation[],
  ) {
    super(
      violations.length === 1
        ? `${file}: ${formatViolation(violations[0] as Violation)}`
        : `${file} has ${violations.length} problems:\n${violations.map((v) => `  - ${formatViolation(v)}`).join('\n')}`,
    );
  }
}

function formatViolation(v: Violation): string {
  return v.at === '' ? v.message : `${v.at}: ${v.message}`;
}

export function formatPath(path: readonly PropertyKey[]): string {
  let out = '';
  for (const key of path) {
    if (typeof key === 'number') out += `[${key}]`;
    else out += out === '' ? String(key) : `.${String(key)}`;
  }
  return out;
}

/** A short rendering of a found value for an error message. */
export function describeValue(value: unknown): string {
  if (value === undefined) return 'nothing';
  if (value === null) return 'null';
  if (typeof value === 'string') return JSON.stringify(value.length > 40 ? `${value.slice(0, 37)}...` : value);
  if (Array.isArray(value)) return `a list of ${value.length}`;
  if (typeof value === 'object') return 'an object';
  if (typeof value === 'number' || typeof value === 'boolean' || typeof value === 'bigint') return String(value);
  return `a ${typeof value}`;
}

/** Names in quotes, the first few only: a file of stray keys must not make a page-long sentence. */
function listNames(names: readonly string[], shown = 8): string {
  const quoted = names.slice(0, shown).map((name) => JSON.stringify(name.length > 40 ? `${name.slice(0, 37)}...` : name));
  return names.length > shown ? `${quoted.join(', ')} and ${names.length - shown} more` : quoted.join(', ');
}

function describeIssue(issue: z.core.$ZodIssue): string {
  // A check that leaves its input out (a value that may hold a password) is not quoted.
  const found = 'input' in issue && issue.input !== undefined ? describeValue(issue.input) : undefined;
  switch (issue.code) {
    case 'invalid_type':
      return `expected ${issue.expected}, found ${found ?? 'nothing'}`;
    case 'unrecognized_keys':
      return `unknown key${issue.keys.length > 1 ? 's' : ''} ${listNames(issue.keys)} (a typo?)`;
    case 'invalid_value':
      return `expected one of ${issue.values.map((v) => JSON.stringify(v)).join(', ')}, found ${found ?? 'nothing'}`;
    case 'invalid_union':
      return `${issue.message}, found ${found ?? 'nothing'}`;
    default: {
      const text = issue.message.replace(/^Invalid input: /, '');
      return found === undefined ? text : `${text}, found ${found}`;
    }
  }
}

/** Validates `data` against `schema`; returns the parsed value or throws {@link ConfigError}. */
export function validate<S extends z.ZodType>(schema: S, data: unknown, file: string): z.output<S> {
  const result = schema.safeParse(data, { reportInput: true });
  if (result.success) return result.data;
  throw new ConfigError(
    file,
    result.error.issues.map((issue) => ({ at: formatPath(issue.path), message: describeIssue(issue) })),
  );
}

/** Levenshtein distance, for "did you mean" suggestions. */
export function editDistance(a: string, b: string): number {
  const x = a.toLowerCase();
  const y = b.toLowerCase();
  let prev = Array.from({ length: y.length + 1 }, (_, j) => j);
  for (let i = 1; i <= x.length; i++) {
    const row = [i];
    for (let j = 1; j <= y.length; j++) {
      const cost = x[i - 1] === y[j - 1] ? 0 : 1;
      row[j] = Math.min((prev[j] as number) + 1, (row[j - 1] as number) + 1, (prev[j - 1] as number) + cost);
    }
    prev = row;
  }
  return prev[y.length] as number;
}

/**
 * Up to `count` of `known` near `name`, nearest first: within a third of the longer name's
 * letters (at least one edit), so that a typo finds its name and a name of another world finds
 * none rather than three unrelated ones.
 */
export function nearestNames(name: string, known: Iterable<string>, count = 3): string[] {
  return [...known]
    .map((k) => ({ k, d: editDistance(name, k) }))
    .filter((e) => e.d <= Math.max(1, Math.floor(Math.max(name.length, e.k.length) / 3)))
    .sort((a, b) => a.d - b.d || a.k.localeCompare(b.k))
    .slice(0, count)
    .map((e) => e.k);
}
