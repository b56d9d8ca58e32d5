/**
 * Lines to readings, configured rather than coded: an instrument's ASCII dialect is described by
 * options (delimited fields with a column map, a regular expression with named groups, or JSON
 * lines with field names), plus per-channel scale, offset and plausible range.
 *
 * Pure and stateless: the same line and arrival time always give the same result, and nothing
 * here throws for bad input: a line that cannot be used becomes a {@link Fault}. Time running
 * backwards is not checked here, because that needs the previous reading: the pipeline checks it
 * and raises `time-backwards`.
 */
import { z } from 'zod';
import { validate } from '../src/config/validation.ts';
import type { ChannelKind, Fault, FaultCode, Reading } from '../src/pipeline/types.ts';
import { FAULT_LINE_CHARS } from './line-framer.ts';

export const ChannelKindSchema = z.enum(['optical', 'crystal']);
const CHANNEL_KINDS: readonly ChannelKind[] = ChannelKindSchema.options;

const finite = z.number().finite();

/** A regular expression's source; refused with the engine's reason when it does not compile. */
const RegexSourceSchema = z.string().superRefine((source, ctx) => {
  try {
    new RegExp(source);
  } catch (error) {
    ctx.addIssue({ code: 'custom', message: `not a valid regular expression (${(error as Error).message})` });
  }
});

/** How a channel's raw number becomes its value: `value · scale + offset`, then the range check. */
export const ChannelScalingSchema = z.strictObject({
  /** Multiplies the raw value (e.g. 0.01 for percent to fraction). Default 1. */
  scale: finite.refine((v) => v !== 0, 'must not be 0').default(1),
  /** Added after scaling, in the channel's units (fraction or Hz). Default 0. */
  offset: finite.default(0),
  /**
   * Plausible values after scaling, `[min, max]` inclusive; a value outside becomes an
   * `out-of-range` fault. Default: no check.
   */
  range: z
    .tuple([finite, finite])
    .refine(([min, max]) => min < max, 'the first value (min) must be below the second (max)')
    .optional(),
});

const commonShape = {
  /** Scaling per channel; channels not listed keep scale 1, offset 0, no range. */
  channels: z
    .strictObject({ optical: ChannelScalingSchema.optional(), crystal: ChannelScalingSchema.optional() })
    .prefault({}),
  /** Multiplies the instrument's timestamp to give seconds (0.001 for milliseconds). Default 1. */
  timeScale: finite.positive().default(1),
  /** Regular expressions; a line matching any of them is ignored (decodes to null). Default none. */
  ignore: z.array(RegexSourceSchema).default([]),
  /** Blank (whitespace-only) lines decode to null rather than a fault. Default true. */
  ignoreBlank: z.boolean().default(true),
  /**
   * Channel tag (the text of the channel column, group or field) to channel, e.g.
   * `{ OPT: optical, XTL: crystal }`. Without it the tag must be `optical` or `crystal` itself.
   */
  channelTags: z.record(z.string().min(1), ChannelKindSchema).optional(),
  /** The channel of every line, for an instrument whose lines carry no channel tag. */
  channel: ChannelKindSchema.optional(),
};

const column = z.number().int().min(0);

export const DelimitedDialectSchema = z.strictObject({
  format: z.literal('delimited'),
  /** Field separator; the word `whitespace` means runs of spaces and tabs. Default `,`. */
  delimiter: z.string().min(1).default(','),
  /** Strip spaces around each field. Default true. */
  trim: z.boolean().default(true),
  /** 0-based field numbers. Extra fields in a line are ignored. */
  columns: z.strictObject({ channel: column.optional(), time: column.optional(), value: column }),
  ...commonShape,
});

export const RegexDialectSchema = z.strictObject({
  format: z.literal('regex'),
  /** A regular expression with named groups `value` and optionally `channel` and `time`. */
  pattern: z.string().min(1),
  /** Flags among `i`, `m`, `s`, `u`. Default none. */
  flags: z.string().regex(/^(?!.*(.).*\1)[imsu]*$/, 'flags among i, m, s, u, each at most once').default(''),
  ...commonShape,
});

/** A field name, or a dotted path into nested objects (`data.frequency`). */
const fieldPath = z.string().min(1);

export const JsonDialectSchema = z.strictObject({
  format: z.literal('json'),
  fields: z.strictObject({ channel: fieldPath.optional(), time: fieldPath.optional(), value: fieldPath }),
  ...commonShape,
});

type DialectShape = z.output<typeof DelimitedDialectSchema> | z.output<typeof RegexDialectSchema> | z.output<typeof JsonDialectSchema>;

/** The names of a pattern's named groups, or undefined when it does not compile. */
function groupNames(pattern: string, flags: string): Set<string> | undefined {
  try {
    // An empty alternative makes the expression match '' so every group shows up in `groups`.
    const match = new RegExp(`${pattern}|`, flags).exec('');
    return new Set(Object.keys(match?.groups ?? {}));
  } catch {
    return undefined;
  }
}

function checkDialect(d: DialectShape, ctx: z.RefinementCtx): void {
  let tagAt: PropertyKey[] | undefined;
  if (d.format === 'delimited') {
    if (d.columns.channel !== undefined) tagAt = ['columns', 'channel'];
    const used = Object.entries(d.columns);
    for (const [name, index] of used) {
      const other = used.find(([n, i]) => n < name && i === index);
      if (other) ctx.addIssue({ code: 'custom', path: ['columns', name], input: index, message: `field ${index} is also the ${other[0]} column` });
    }
  } else if (d.format === 'regex') {
    let groups: Set<string> | undefined;
    try {
      new RegExp(d.pattern, d.flags);
      groups = groupNames(d.pattern, d.flags);
    } catch (error) {
      ctx.addIssue({ code: 'custom', path: ['pattern'], input: d.pattern, message: `not a valid regular expression (${(error as Error).message})` });
    }
    if (groups && !groups.has('value')) ctx.addIssue({ code: 'custom', path: ['pattern'], input: d.pattern, message: 'needs a named group (?<value>...)' });
    if (groups?.has('channel')) tagAt = ['pattern'];
  } else if (d.fields.channel !== undefined) {
    tagAt = ['fields', 'channel'];
  }
  if (tagAt && d.channel !== undefined) {
    ctx.addIssue({ code: 'custom', path: ['channel'], input: d.channel, message: `give either a channel tag (${tagAt.join('.')}) or a fixed channel, not both` });
  }
  if (!tagAt && d.channel === undefined) {
    ctx.addIssue({ code: 'custom', path: ['channel'], input: d.channel, message: 'needed when the lines carry no channel tag: optical or crystal' });
  }
  if (!tagAt && d.channelTags !== undefined) {
    ctx.addIssue({ code: 'custom', path: ['channelTags'], input: d.channelTags, message: 'only meaningful with a channel tag in the line' });
  }
}

/** The options of {@link createLineDecoder}: one of three dialects. */
export const LineDecoderOptionsSchema = z
  .discriminatedUnion('format', [DelimitedDialectSchema, RegexDialectSchema, JsonDialectSchema])
  .superRefine(checkDialect);
/** What a caller or a chamber file writes; fields with defaults may be left out. */
export type LineDecoderOptions = z.input<typeof LineDecoderOptionsSchema>;
export type ResolvedLineDecoderOptions = z.output<typeof LineDecoderOptionsSchema>;

/**
 * fringe's own line format, spoken by the simulator: `OPT,<time_s>,<fraction>` and
 * `XTL,<time_s>,<frequency_hz>`. Shutter acknowledgements (`ACK ...`) on the same line are
 * ignored here; the shutter output reads them.
 */
export const FRINGE_DIALECT: LineDecoderOptions = freezeDeep({
  format: 'delimited',
  delimiter: ',',
  columns: { channel: 0, time: 1, value: 2 },
  channelTags: { OPT: 'optical', XTL: 'crystal' },
  ignore: ['^ACK '],
  // Plausibility bands, common practice, no source: an optical fraction far outside 0..1 and a
  // crystal outside 1–20 MHz (monitor crystals are cut for 5 or 6 MHz and fall as they load)
  // are not readings but garbage.
  channels: { optical: { range: [-0.5, 1.5] }, crystal: { range: [1e6, 2e7] } },
});

function freezeDeep<T>(value: T): T {
  if (value !== null && typeof value === 'object') {
    for (const child of Object.values(value)) freezeDeep(child);
    Object.freeze(value);
  }
  return value;
}

/** Decodes one line (without its terminator); null for a line the options say to ignore. */
export type LineDecoder = (line: string, arrivalS: number) => Reading | Fault | null;

/** One extracted field: its raw text or JSON value and where it starts in the line. */
interface Field {
  readonly raw: unknown;
  readonly offset: number;
}
interface Fields {
  readonly channel?: Field | undefined;
  readonly time?: Field | undefined;
  readonly value: Field;
}
interface Failure {
  readonly fail: FaultCode;
  readonly offset: number;
}
type Extractor = (line: string) => Fields | Failure;

interface Scaling {
  readonly scale: number;
  readonly offset: number;
  readonly min: number;
  readonly max: number;
}

/** Creates a decoder; a bad option throws a `ConfigError` naming it (e.g. `columns.value`). */
export function createLineDecoder(options: LineDecoderOptions): LineDecoder {
  const o = validate(LineDecoderOptionsSchema, options, 'createLineDecoder options');
  const ignore = o.ignore.map((source) => new RegExp(source));
  const scaling: Record<ChannelKind, Scaling> = { optical: toScaling(o.channels.optical), crystal: toScaling(o.channels.crystal) };
  const tags = o.channelTags === undefined ? undefined : new Map(Object.entries(o.channelTags));
  const extract = o.format === 'delimited' ? delimitedExtractor(o) : o.format === 'regex' ? regexExtractor(o) : jsonExtractor(o);
  const fixedChannel = o.channel;
  const timeScale = o.timeScale;
  const ignoreBlank = o.ignoreBlank;

  return (line, arrivalS) => {
    if (ignoreBlank && line.trim() === '') return null;
    for (const pattern of ignore) if (pattern.test(line)) return null;
    const fields = extract(line);
    if ('fail' in fields) return fault(line, fields.fail, fields.offset, 'unknown', arrivalS);
    let channel: ChannelKind;
    if (fields.channel !== undefined) {
      const tag = typeof fields.channel.raw === 'string' || typeof fields.channel.raw === 'number' ? String(fields.channel.raw) : undefined;
      const kind = tag === undefined ? undefined : tags ? tags.get(tag) : CHANNEL_KINDS.find((k) => k === tag);
      if (kind === undefined) return fault(line, 'unknown-channel', fields.channel.offset, 'unknown', arrivalS);
      channel = kind;
    } else {
      // The schema guarantees a fixed channel when the line has no tag.
      channel = fixedChannel as ChannelKind;
    }
    const raw = toNumber(fields.value.raw);
    if (raw === undefined) return fault(line, 'not-a-number', fields.value.offset, channel, arrivalS);
    let timeS = arrivalS;
    if (fields.time !== undefined) {
      const t = toNumber(fields.time.raw);
      if (t === undefined) return fault(line, 'not-a-number', fields.time.offset, channel, arrivalS);
      timeS = t * timeScale;
      // A finite number scaled past the largest double is no time at all.
      if (!Number.isFinite(timeS)) return fault(line, 'out-of-range', fields.time.offset, channel, arrivalS);
    }
    const s = scaling[channel];
    const value = raw * s.scale + s.offset;
    if (!(value >= s.min && value <= s.max) || !Number.isFinite(value)) return fault(line, 'out-of-range', fields.value.offset, channel, arrivalS);
    return { kind: 'reading', channel, value, timeS, arrivalS };
  };
}

function toScaling(s: z.output<typeof ChannelScalingSchema> | undefined): Scaling {
  return {
    scale: s?.scale ?? 1,
    offset: s?.offset ?? 0,
    min: s?.range?.[0] ?? Number.NEGATIVE_INFINITY,
    max: s?.range?.[1] ?? Number.POSITIVE_INFINITY,
  };
}

function fault(line: string, code: FaultCode, offset: number, channel: ChannelKind | 'unknown', arrivalS: number): Fault {
  return { kind: 'fault', channel, code, line: line.length > FAULT_LINE_CHARS ? line.slice(0, FAULT_LINE_CHARS) : line, offset, arrivalS };
}

/** A plain decimal number, optionally signed, with an optional exponent; no hex, no words. */
const NUMBER = /^[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?$/;

/** A finite number from a JSON number or a numeric string; undefined otherwise (the spectral forms read theirs so too). */
export function toNumber(raw: unknown): number | undefined {
  if (typeof raw === 'number') return Number.isFinite(raw) ? raw : undefined;
  if (typeof raw !== 'string') return undefined;
  const text = raw.trim();
  if (!NUMBER.test(text)) return undefined;
  const value = Number(text);
  return Number.isFinite(value) ? value : undefined;
}

function delimitedExtractor(o: z.output<typeof DelimitedDialectSchema>): Extractor {
  const { delimiter, trim, columns } = o;
  const needed = Math.max(columns.value, columns.channel ?? 0, columns.time ?? 0) + 1;
  const split = delimiter === 'whitespace' ? splitWhitespace : (line: string) => splitOn(line, delimiter, trim);
  return (line) => {
    const fields = split(line);
    if (fields.length < needed) return { fail: 'garbled', offset: line.length };
    const at = (index: number | undefined): Field | undefined => (index === undefined ? undefined : fields[index]);
    return { channel: at(columns.channel), time: at(columns.time), value: fields[columns.value] as Field };
  };
}

function splitOn(line: string, delimiter: string, trim: boolean): Field[] {
  const out: Field[] = [];
  let start = 0;
  for (;;) {
    const end = line.indexOf(delimiter, start);
    const stop = end === -1 ? line.length : end;
    let text = line.slice(start, stop);
    let offset = start;
    if (trim) {
      const lead = text.length - text.trimStart().length;
      offset += lead;
      text = text.trim();
    }
    out.push({ raw: text, offset });
    if (end === -1) return out;
    start = end + delimiter.length;
  }
}

function splitWhitespace(line: string): Field[] {
  const out: Field[] = [];
  for (const match of line.matchAll(/[^ \t]+/g)) out.push({ raw: match[0], offset: match.index });
  return out;
}

function regexExtractor(o: z.output<typeof RegexDialectSchema>): Extractor {
  // `d` gives the groups' positions, for the fault offsets.
  const pattern = new RegExp(o.pattern, `${o.flags}d`);
  return (line) => {
    const match = pattern.exec(line);
    if (match === null) return { fail: 'garbled', offset: 0 };
    const group = (name: string): Field | undefined => {
      const text = match.groups?.[name];
      return text === undefined ? undefined : { raw: text, offset: match.indices?.groups?.[name]?.[0] ?? 0 };
    };
    const value = group('value');
    if (value === undefined) return { fail: 'garbled', offset: match.index };
    const channel = group('channel');
    // A pattern with an optional channel group that did not take part: the line has no tag.
    if (channel === undefined && o.channel === undefined) return { fail: 'unknown-channel', offset: match.index };
    return { channel, time: group('time'), value };
  };
}

function jsonExtractor(o: z.output<typeof JsonDialectSchema>): Extractor {
  const paths = {
    channel: o.fields.channel?.split('.'),
    time: o.fields.time?.split('.'),
    value: o.fields.value.split('.'),
  };
  return (line) => {
    let data: unknown;
    try {
      data = JSON.parse(line);
    } catch (error) {
      const position = /position (\d+)/.exec((error as Error).message)?.[1];
      return { fail: 'garbled', offset: position === undefined ? 0 : Math.min(Number(position), line.length) };
    }
    if (data === null || typeof data !== 'object' || Array.isArray(data)) return { fail: 'garbled', offset: 0 };
    const field = (path: readonly string[] | undefined): Field | undefined | 'missing' => {
      if (path === undefined) return undefined;
      let at: unknown = data;
      for (const key of path) {
        if (at === null || typeof at !== 'object' || Array.isArray(at) || !Object.hasOwn(at, key)) return 'missing';
        at = (at as Record<string, unknown>)[key];
      }
      // Where the field's key is in the line (the first occurrence: good enough for a person).
      const offset = line.indexOf(JSON.stringify(path[path.length - 1]));
      return { raw: at, offset: Math.max(0, offset) };
    };
    const value = field(paths.value);
    const channel = field(paths.channel);
    const time = field(paths.time);
    if (value === undefined || value === 'missing' || channel === 'missing' || time === 'missing') return { fail: 'garbled', offset: 0 };
    return { channel, time, value };
  };
}
