// Every line dialect fed well-formed lines with one field mutated (digits, signs, exponents,
// huge and tiny numbers, foreign digits and minus signs, separators): a reading only when the
// line still says a number and it is that number, else a fault pointing inside the line.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { createLineDecoder, FRINGE_DIALECT, type LineDecoder } from '../../drivers/line-decoder.ts';
import type { ChannelKind, Fault } from '../../src/pipeline/types.ts';
import { fuzz, FUZZ_TIMEOUT_MS } from './fuzz-runs.ts';

/** The number grammar every dialect documents: plain decimal, optional sign and exponent. */
const DECIMAL = /^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$/;

/** What a field's text says: the finite number it writes, or undefined for anything else. */
function numberWritten(text: string): number | undefined {
  const trimmed = text.trim();
  if (!DECIMAL.test(trimmed)) return undefined;
  const value = Number(trimmed);
  return Number.isFinite(value) ? value : undefined;
}

const tagOf: Record<ChannelKind, string> = { optical: 'OPT', crystal: 'XTL' };

/** A number as an instrument might print it. */
const numberText = fc.oneof(
  fc.double({ noNaN: true, noDefaultInfinity: true }).map(String),
  fc.tuple(fc.double({ noNaN: true, noDefaultInfinity: true, min: -1e6, max: 1e6 }), fc.integer({ min: 0, max: 12 })).map(([v, d]) => v.toFixed(d)),
  fc.tuple(fc.double({ noNaN: true, noDefaultInfinity: true }), fc.integer({ min: 0, max: 16 })).map(([v, d]) => v.toExponential(d)),
  fc.integer({ min: -1e9, max: 1e9 }).map(String),
  fc.constantFrom('0.5', '5999123.25', '6.0e6', '12.5', '0', '-0', '+1', '.5', '5.', '1E3'),
);

/** Characters a noisy line or a different instrument might put in a number. */
const intruder = fc.constantFrom(
  ...'0123456789+-eE.,; \t_x#'.split(''),
  '\u2212', // minus sign
  '\uFF11', // fullwidth one
  '\u0663', // Arabic-Indic three
  '\u00A0', // no-break space
  '\u200B', // zero-width space
  'é',
  '𝟙',
  'NaN',
  'Infinity',
  '0x',
  'e+',
);

/** Whole replacements at the edges of what a double holds. */
const extreme = fc.constantFrom(
  '1e308',
  '1.7976931348623157e308',
  '1.7976931348623159e308',
  '1e309',
  '-1e309',
  '5e-324',
  '1e-400',
  '-1e-400',
  '9'.repeat(400),
  `0.${'0'.repeat(400)}1`,
  '1e1000000000000',
  '1e-1000000000000',
  '',
  ' ',
  '+',
  '-',
  '.',
  'e5',
  '1e',
  '1e+',
  '--1',
  '+-1',
  '1..2',
  '1.2.3',
  '1_000',
  '0x1F',
  '0b1',
  '1n',
  'Infinity',
  '-Infinity',
  'NaN',
  'null',
  'true',
  '\u0663',
  '１２',
);

type Mutation = (text: string) => string;
const mutation: fc.Arbitrary<Mutation> = fc.oneof(
  fc.tuple(fc.nat(), intruder).map(([at, c]): Mutation => (t) => {
    const i = at % (t.length + 1);
    return t.slice(0, i) + c + t.slice(i);
  }),
  fc.nat().map((at): Mutation => (t) => {
    const i = at % Math.max(1, t.length);
    return t.slice(0, i) + t.slice(i + 1);
  }),
  fc.tuple(fc.nat(), intruder).map(([at, c]): Mutation => (t) => {
    const i = at % Math.max(1, t.length);
    return t.slice(0, i) + c + t.slice(i + 1);
  }),
  extreme.map((e): Mutation => () => e),
  fc.constant<Mutation>((t) => `-${t}`),
  fc.constant<Mutation>((t) => `${t}e-5`),
  fc.constant<Mutation>((t) => `${t}e400`),
  fc.constant<Mutation>((t) => ` ${t} `),
);

interface Sample {
  channel: ChannelKind;
  time: string;
  value: string;
  mutate: 'time' | 'value';
  mutation: Mutation;
}
const sample: fc.Arbitrary<Sample> = fc.record({
  channel: fc.constantFrom<ChannelKind>('optical', 'crystal'),
  time: numberText,
  value: numberText,
  mutate: fc.constantFrom<'time' | 'value'>('time', 'value'),
  mutation,
});

/** The line as written, with the field chosen mutated; where each field starts. */
interface Written {
  line: string;
  time: string;
  value: string;
  /** Start and end of each number field in the line (the whole line where a mutation moved them). */
  spans: { time: [number, number]; value: [number, number] };
}

/** `head time sep value tail`, with the fields' spans; the whole line when a field holds `splits`. */
function written(head: string, time: string, sep: string, value: string, tail: string, splits: RegExp): Written {
  const line = `${head}${time}${sep}${value}${tail}`;
  const whole: [number, number] = [0, line.length];
  if (splits.test(time) || splits.test(value)) return { line, time, value, spans: { time: whole, value: whole } };
  const valueAt = head.length + time.length + sep.length;
  return { line, time, value, spans: { time: [head.length, head.length + time.length], value: [valueAt, valueAt + value.length] } };
}

function mutated(s: Sample): { time: string; value: string } {
  return s.mutate === 'time' ? { time: s.mutation(s.time), value: s.value } : { time: s.time, value: s.mutation(s.value) };
}

/**
 * Checks one decoded line against what was written: a reading carries exactly the written
 * numbers (scaled and range-checked as configured), and a line that does not say them is a
 * fault at an offset inside the line.
 */
function check(out: ReturnType<LineDecoder>, w: Written, expected: { channel: ChannelKind; time: number | undefined; value: number | undefined; range?: [number, number] } | 'fault'): void {
  expect(out).not.toBeNull();
  const result = out as NonNullable<typeof out>;
  const inRange = expected !== 'fault' && expected.value !== undefined && (!expected.range || (expected.value >= expected.range[0] && expected.value <= expected.range[1]));
  if (expected !== 'fault' && expected.time !== undefined && expected.value !== undefined && inRange) {
    expect(result).toMatchObject({ kind: 'reading', channel: expected.channel });
    if (result.kind !== 'reading') return;
    // Compared with ===: a silently different number (even by one ulp) must fail here; -0 reads as 0.
    expect(result.value === expected.value, `value ${result.value} for ${JSON.stringify(w.line)}`).toBe(true);
    expect(result.timeS === expected.time, `time ${result.timeS} for ${JSON.stringify(w.line)}`).toBe(true);
    return;
  }
  expect(result.kind, `a reading from ${JSON.stringify(w.line)}`).toBe('fault');
  const fault = result as Fault;
  expect(fault.offset).toBeGreaterThanOrEqual(0);
  expect(fault.offset).toBeLessThanOrEqual(w.line.length);
  if ((fault.code === 'not-a-number' || fault.code === 'out-of-range') && expected !== 'fault') {
    // The fault points into a number that is wrong.
    const bad = [...(expected.time === undefined ? [w.spans.time] : []), ...(expected.value === undefined || !inRange ? [w.spans.value] : [])];
    expect(bad.some(([from, to]) => fault.offset >= from && fault.offset <= to), `offset ${fault.offset} in ${JSON.stringify(w.line)}`).toBe(true);
  }
}

describe('every line dialect, one field mutated', () => {
  const fringe = createLineDecoder(FRINGE_DIALECT);
  const [opticalRange, crystalRange] = [FRINGE_DIALECT.channels?.optical?.range, FRINGE_DIALECT.channels?.crystal?.range] as [[number, number], [number, number]];

  it("fringe's own dialect (delimited, tagged, ranged)", () => {
    fuzz(
      'line dialect: fringe',
      fc.property(sample, (s) => {
        const { time, value } = mutated(s);
        const w = written(`${tagOf[s.channel]},`, time, ',', value, '', /,/);
        const line = w.line;
        // A separator put into a field splits the line there: the spec reads the first three fields.
        const fields = line.split(',');
        const range = s.channel === 'optical' ? opticalRange : crystalRange;
        if (line.trim() === '') return;
        check(fringe(line, 7), w, fields.length < 3 ? 'fault' : { channel: s.channel, time: numberWritten(fields[1] as string), value: numberWritten(fields[2] as string), range });
      }),
    );
  }, FUZZ_TIMEOUT_MS);

  it('a delimited dialect on whitespace, milliseconds and percent', () => {
    const decode = createLineDecoder({
      format: 'delimited',
      delimiter: 'whitespace',
      columns: { channel: 0, time: 1, value: 2 },
      channelTags: { OPT: 'optical', XTL: 'crystal' },
      timeScale: 0.001,
      channels: { optical: { scale: 0.01 } },
    });
    fuzz(
      'line dialect: delimited',
      fc.property(sample, (s) => {
        const { time, value } = mutated(s);
        const w = written(`${tagOf[s.channel]}\t`, time, '\t', value, '', /[ \t]/);
        const line = w.line;
        const fields = line.split(/[ \t]+/).filter((f) => f !== '');
        const t = numberWritten(fields[1] ?? '');
        const v = numberWritten(fields[2] ?? '');
        const scale = s.channel === 'optical' ? 0.01 : 1;
        // A number scaled past the largest double is no number: the decoder must say so.
        const expected = fields.length < 3 || t === undefined || v === undefined ? 'fault' : { channel: s.channel, time: t * 0.001, value: v * scale };
        if (expected !== 'fault' && !(Number.isFinite(expected.time) && Number.isFinite(expected.value))) {
          check(decode(line, 7), w, 'fault');
          return;
        }
        check(decode(line, 7), w, expected);
      }),
    );
  }, FUZZ_TIMEOUT_MS);

  it('a regex dialect', () => {
    const decode = createLineDecoder({ format: 'regex', pattern: '^(?<channel>OPT|XTL) t=(?<time>\\S+) v=(?<value>\\S+)$', channelTags: { OPT: 'optical', XTL: 'crystal' } });
    fuzz(
      'line dialect: regex',
      fc.property(sample, (s) => {
        const { time, value } = mutated(s);
        const w = written(`${tagOf[s.channel]} t=`, time, ' v=', value, '', /\s/);
        const line = w.line;
        const match = /^(OPT|XTL) t=(\S+) v=(\S+)$/.exec(line);
        check(decode(line, 7), w, match === null ? 'fault' : { channel: s.channel, time: numberWritten(match[2] as string), value: numberWritten(match[3] as string) });
      }),
    );
  }, FUZZ_TIMEOUT_MS);

  it('a json dialect, numbers as JSON numbers or as strings', () => {
    const decode = createLineDecoder({ format: 'json', fields: { channel: 'ch', time: 'at.t', value: 'v' }, channelTags: { OPT: 'optical', XTL: 'crystal' } });
    fuzz(
      'line dialect: json',
      fc.property(sample, fc.boolean(), (s, quoted) => {
        const { time, value } = mutated(s);
        const put = (text: string): string => (quoted ? JSON.stringify(text) : text);
        const head = `{"ch":"${tagOf[s.channel]}","at":{"t":`;
        const line = `${head}${put(time)}},"v":${put(value)}}`;
        const w: Written = { line, time, value, spans: { time: [0, line.length], value: [0, line.length] } };
        let parsed: { at: { t: unknown }; v: unknown } | undefined;
        try {
          parsed = JSON.parse(line) as typeof parsed;
        } catch {
          parsed = undefined;
        }
        const read = (raw: unknown): number | undefined => (typeof raw === 'number' ? (Number.isFinite(raw) ? raw : undefined) : typeof raw === 'string' ? numberWritten(raw) : undefined);
        const out = decode(line, 7);
        check(out, w, parsed === undefined ? 'fault' : { channel: s.channel, time: read(parsed.at.t), value: read(parsed.v) });
        // A number that survives must be the one the text wrote: JSON's reading of it, not another.
        if (out?.kind === 'reading' && !quoted) expect(out.value === Number(value.trim()) || Object.is(Number(value.trim()), -0)).toBe(true);
      }),
    );
  }, FUZZ_TIMEOUT_MS);
});
