/**
 * The run journal: append-only NDJSON, one record a line, a format version in the first line.
 * Readings are compact (they are most of the file); inputs and events are stored whole.
 *
 *   {"journal":"fringe","version":1,"runId":"…","startedAt":"…","recipe":"…",…}   first line
 *   {"k":"r","c":"o","t":12.3,"v":0.91234,"a":12.3}     reading (c: o optical, x crystal)
 *   {"k":"g","g":1,"nm":[400,402,…]}                     a spectral grid, before its first spectrum
 *   {"k":"s","g":1,"t":12.3,"a":12.3,"q":6,"v":[912345,…]}   a spectrum on grid 1: with `q`, each
 *                                                        value is v/10^q exactly; without, v as is
 *   {"k":"i","t":12.4,"input":{…}}                      another input (operator, fault, ack)
 *   {"k":"e","event":{…}}                                 an event the controller decided
 *   {"k":"m","t":80.2,"mark":"resumed","at":"…","meta":{…}}   a note on the run itself (not an
 *                                                        input): where a resumed session took it up
 *
 * Every line written ends in its number and a check, `,"n":S,"z":N}`: S counts the lines written
 * (the header 0, the records from 1, a resumed session going on from the last), N is the CRC-32
 * of the line up to and with its number. A byte changed is seen at its line, a line repeated or
 * moved by a number not after the last, lines lost by a gap in the numbers: never read as a
 * number they were not. Journals from before the check have none and are read as they are.
 *
 * Readers skip a damaged line (not JSON, none of these shapes, or its check fails) and say which
 * they skipped: one torn write must not cost the rest of the run.
 */
import type { RunEvent } from '../pipeline/events.ts';
import type { PipelineInput, Reading, SpectrumReading } from '../pipeline/types.ts';

export const JOURNAL_VERSION = 1;

export interface JournalHeader {
  readonly journal: 'fringe';
  readonly version: number;
  readonly runId: string;
  readonly startedAt: string;
  readonly recipe: string;
  /** Free-form facts about the run: source (live, simulated, replay), seed, profile, estimator. */
  readonly meta: Readonly<Record<string, unknown>>;
}

/** How the recorded run cut its optical layers (`meta.estimator`; journals from before it was recorded: the plain rules). */
export function journalEstimator(header: JournalHeader): 'fit' | 'plain' {
  return header.meta.estimator === 'fit' ? 'fit' : 'plain';
}

/** Whether the recorded run held its layers for unconfirmed closes (`meta.confirmCloses`, live runs), as its replay must. */
export function journalConfirmsCloses(header: JournalHeader): boolean {
  return header.meta.confirmCloses === true;
}

/** A note on the run itself, not fed to the controller: where a resumed session took it up. */
export interface JournalMark {
  readonly k: 'm';
  /** Run time, s: where the resumed session continued. */
  readonly t: number;
  readonly mark: 'resumed';
  /** Wall time of the new session (ISO 8601). */
  readonly at: string;
  /** The new session's facts (chamber, clock, estimator), as a header's meta. */
  readonly meta: Readonly<Record<string, unknown>>;
}

/** A spectral monitor's wavelength grid, numbered in the journal; written once, before its first spectrum. */
export interface GridRecord {
  readonly k: 'g';
  readonly g: number;
  readonly nm: readonly number[];
}

/**
 * A spectrum on grid `g`. With `q` the values are integers, each value being v / 10^q exactly
 * (what an instrument sent as decimals is stored in its own digits, no longer); without `q` the
 * values are the numbers themselves. Either way it reads back to the same doubles.
 */
export interface SpectrumRecord {
  readonly k: 's';
  readonly g: number;
  readonly t: number;
  readonly a: number;
  readonly q?: number;
  readonly v: readonly number[];
}

export type JournalRecord =
  | { readonly k: 'r'; readonly c: 'o' | 'x'; readonly t: number; readonly v: number; readonly a: number }
  | GridRecord
  | SpectrumRecord
  | { readonly k: 'i'; readonly t: number; readonly input: Exclude<PipelineInput, Reading | SpectrumReading> }
  | { readonly k: 'e'; readonly event: RunEvent }
  | JournalMark;

const isObject = (v: unknown): v is Record<string, unknown> => typeof v === 'object' && v !== null && !Array.isArray(v);

/**
 * What is wrong with a parsed first line as a journal header, in words that never quote it (it
 * may be binary junk), or null when it is a header of this version.
 */
export function headerProblem(value: unknown): string | null {
  if (!isObject(value) || value.journal !== 'fringe') return 'is not a fringe journal (its first line is no journal header)';
  if (value.version !== JOURNAL_VERSION) {
    const version = typeof value.version === 'number' ? String(value.version) : 'of no known version';
    return `is journal version ${version}; this fringe reads version ${JOURNAL_VERSION}`;
  }
  for (const field of ['runId', 'startedAt', 'recipe'] as const) {
    if (typeof value[field] !== 'string') return `has a damaged header: its ${field} is not a string`;
  }
  if (!isObject(value.meta)) return 'has a damaged header: its meta is not an object';
  return null;
}

/** True when a parsed line has the shape of one of the records above (the fields replay reads). */
export function isJournalRecord(value: unknown): value is JournalRecord {
  if (!isObject(value)) return false;
  switch (value.k) {
    case 'r':
      return (value.c === 'o' || value.c === 'x') && typeof value.t === 'number' && typeof value.v === 'number' && typeof value.a === 'number';
    case 'g':
      return Number.isSafeInteger(value.g) && Array.isArray(value.nm) && value.nm.length > 0 && value.nm.every((v) => typeof v === 'number');
    case 's':
      return (
        Number.isSafeInteger(value.g) &&
        typeof value.t === 'number' &&
        typeof value.a === 'number' &&
        (value.q === undefined || (Number.isInteger(value.q) && (value.q as number) >= 0 && (value.q as number) <= MAX_DECIMALS)) &&
        Array.isArray(value.v) &&
        value.v.every((v) => typeof v === 'number')
      );
    case 'i':
      return typeof value.t === 'number' && isObject(value.input) && typeof value.input.kind === 'string' && value.input.kind !== 'reading' && value.input.kind !== 'spectrum';
    case 'e':
      return isObject(value.event) && typeof value.event.type === 'string' && typeof value.event.timeS === 'number';
    case 'm':
      return typeof value.t === 'number' && typeof value.mark === 'string' && typeof value.at === 'string' && isObject(value.meta);
    default:
      return false;
  }
}

export function readingRecord(r: Reading): JournalRecord {
  return { k: 'r', c: r.channel === 'optical' ? 'o' : 'x', t: r.timeS, v: r.value, a: r.arrivalS };
}

/**
 * The input a record holds (a reading or another input), or undefined for an event, a mark, a
 * grid, and a spectrum (whose grid only a reader that has seen it knows: {@link createInputReader}).
 */
export function recordToInput(record: JournalRecord): PipelineInput | undefined {
  if (record.k === 'r') {
    return { kind: 'reading', channel: record.c === 'o' ? 'optical' : 'crystal', value: record.v, timeS: record.t, arrivalS: record.a };
  }
  if (record.k === 'i') return record.input;
  return undefined;
}

/** Most decimals a spectrum is stored with as integers (more would pass 2^53 for values near 1). */
const MAX_DECIMALS = 9;
const POWERS = Array.from({ length: MAX_DECIMALS + 1 }, (_, q) => 10 ** q);

/**
 * The write side of spectra: the records for one spectrum, its grid's record first whenever the
 * grid is one not written yet (a channel's grid is fixed, so that is once a run).
 */
export function createSpectrumRecorder(): (spectrum: SpectrumReading) => JournalRecord[] {
  let last: { nm: Float64Array; g: number } | undefined;
  return (spectrum) => {
    const out: JournalRecord[] = [];
    const nm = spectrum.wavelengthsNm;
    if (last === undefined || (last.nm !== nm && !sameValues(last.nm, nm))) {
      last = { nm, g: (last?.g ?? 0) + 1 };
      out.push({ k: 'g', g: last.g, nm: Array.from(nm) });
    }
    const q = decimalsOf(spectrum.values);
    const v = Array.from(spectrum.values);
    if (q === undefined) out.push({ k: 's', g: last.g, t: spectrum.timeS, a: spectrum.arrivalS, v });
    else {
      const scale = POWERS[q] as number;
      for (let i = 0; i < v.length; i++) v[i] = Math.round((v[i] as number) * scale);
      out.push({ k: 's', g: last.g, t: spectrum.timeS, a: spectrum.arrivalS, q, v });
    }
    return out;
  };
}

function sameValues(a: Float64Array, b: Float64Array): boolean {
  if (a.length !== b.length) return false;
  for (let i = 0; i < a.length; i++) if (a[i] !== b[i]) return false;
  return true;
}

/**
 * The fewest decimals q with every value exactly round(v·10^q)/10^q (a value read from q
 * decimals of text is: the quotient of two exact integers is correctly rounded, like the parse),
 * or undefined when none up to MAX_DECIMALS does (a scaled value, -0).
 */
function decimalsOf(values: Float64Array): number | undefined {
  let q = 0;
  for (let i = 0; i < values.length; i++) {
    const v = values[i] as number;
    if (Object.is(v, -0)) return undefined;
    while (Math.round(v * (POWERS[q] as number)) / (POWERS[q] as number) !== v) {
      if (++q > MAX_DECIMALS) return undefined;
    }
  }
  // Each value's integer must be exact at the common q too (a safe integer, read back the same).
  const scale = POWERS[q] as number;
  for (let i = 0; i < values.length; i++) {
    const v = values[i] as number;
    const n = Math.round(v * scale);
    if (!Number.isSafeInteger(n) || n / scale !== v) return undefined;
  }
  return q;
}

/**
 * The records of each input in turn: a reading compact, a spectrum as {@link createSpectrumRecorder}
 * writes it, any other input whole. One recorder per journal (it numbers the grids).
 */
export function createInputRecorder(): (input: PipelineInput) => JournalRecord[] {
  const spectrum = createSpectrumRecorder();
  return (input) => {
    if (input.kind === 'reading') return [readingRecord(input)];
    if (input.kind === 'spectrum') return spectrum(input);
    return [{ k: 'i', t: input.kind === 'fault' ? input.arrivalS : input.timeS, input }];
  };
}

/**
 * The read side: each record's input, spectra with the grid their journal wrote before them
 * (a spectrum whose grid is missing, after damage, gives none). One reader per pass.
 */
export function createInputReader(): (record: JournalRecord) => PipelineInput | undefined {
  const grids = new Map<number, Float64Array>();
  return (record) => {
    if (record.k === 'g') {
      grids.set(record.g, Float64Array.from(record.nm));
      return undefined;
    }
    if (record.k !== 's') return recordToInput(record);
    const grid = grids.get(record.g);
    if (grid === undefined || grid.length !== record.v.length) return undefined;
    const values = Float64Array.from(record.v);
    if (record.q !== undefined) {
      const scale = POWERS[record.q] as number;
      for (let i = 0; i < values.length; i++) values[i] = (values[i] as number) / scale;
    }
    return { kind: 'spectrum', channel: 'spectral', wavelengthsNm: grid, values, timeS: record.t, arrivalS: record.a };
  };
}

/** JSON has no NaN or Infinity: write them as strings and read them back. */
export function stringifyRecord(record: JournalRecord | JournalHeader): string {
  return JSON.stringify(record, (_key, value: unknown) =>
    typeof value === 'number' && !Number.isFinite(value) ? String(value) : value,
  );
}

const NON_FINITE: Record<string, number> = { NaN: Number.NaN, Infinity: Number.POSITIVE_INFINITY, '-Infinity': Number.NEGATIVE_INFINITY };

const reviveNonFinite = (_key: string, value: unknown): unknown => (typeof value === 'string' && Object.hasOwn(NON_FINITE, value) ? NON_FINITE[value] : value);
const QUOTED_NON_FINITE = /"(?:NaN|-?Infinity)"/;

/** The reviver costs ~3× the parse: used only on lines that hold a quoted NaN or ±Infinity. */
export function parseRecord(line: string): unknown {
  return QUOTED_NON_FINITE.test(line) ? JSON.parse(line, reviveNonFinite) : JSON.parse(line);
}

const SEQ_FIELD = ',"n":';
const CHECK_FIELD = ',"z":';

/** The CRC-32 table (IEEE 802.3, reflected polynomial 0xEDB88320), as zlib's. */
const CRC_TABLE = (() => {
  const table = new Int32Array(256);
  for (let n = 0; n < 256; n++) {
    let c = n;
    for (let k = 0; k < 8; k++) c = c & 1 ? 0xedb88320 ^ (c >>> 1) : c >>> 1;
    table[n] = c;
  }
  return table;
})();

/**
 * The CRC-32 of the UTF-8 bytes of `text` from `start` to `end`, then of `then` (a character
 * code below 0x80). In JavaScript: zlib's costs more in the call than a line's ~80 bytes here.
 * A run of characters from 0x80 up (rare: words in alerts) is encoded by Buffer, as the file is.
 */
function crc32Text(text: string, start: number, end: number, then: number): number {
  let c = -1;
  for (let i = start; i < end; i++) {
    const code = text.charCodeAt(i);
    if (code < 0x80) c = (CRC_TABLE[(c ^ code) & 0xff] as number) ^ (c >>> 8);
    else {
      const bytes = Buffer.from(text.slice(i, (i = nextAscii(text, i, end))));
      i--;
      for (const b of bytes) c = (CRC_TABLE[(c ^ b) & 0xff] as number) ^ (c >>> 8);
    }
  }
  c = (CRC_TABLE[(c ^ then) & 0xff] as number) ^ (c >>> 8);
  return (c ^ -1) >>> 0;
}

/** The index of the first character below 0x80 from `i` on (or `end`): a run of others is encoded at once. */
function nextAscii(text: string, i: number, end: number): number {
  while (i < end && text.charCodeAt(i) >= 0x80) i++;
  return i;
}

const CLOSE_BRACE = 0x7d;

/** `body` (a record's or header's JSON text) as the line written: its number in the sequence and its check. */
export function sealLine(body: string, seq: number): string {
  const numbered = `${body.slice(0, -1)}${SEQ_FIELD}${seq}`;
  return `${numbered}${CHECK_FIELD}${crc32Text(numbered, 0, numbered.length, CLOSE_BRACE)}}`;
}

/** A sealed line taken apart: the JSON text it was sealed from, its number, and whether its check holds. */
export interface UnsealedLine {
  readonly body: string;
  /** NaN when the check fails (the number may be damaged too). */
  readonly seq: number;
  readonly intact: boolean;
}

/** The whole number written from `start` to `end` (at most 15 digits), or NaN. */
function digitsAt(text: string, start: number, end: number): number {
  if (end <= start || end - start > 15) return Number.NaN;
  let value = 0;
  for (let i = start; i < end; i++) {
    const d = text.charCodeAt(i) - 0x30;
    if (d < 0 || d > 9) return Number.NaN;
    value = value * 10 + d;
  }
  return value;
}

/** A line taken apart, or null when it ends in no check (a journal from before them, or a line that lost it). */
export function unsealLine(text: string): UnsealedLine | null {
  const at = text.lastIndexOf(CHECK_FIELD);
  if (at < 0 || text.charCodeAt(text.length - 1) !== CLOSE_BRACE) return null;
  const check = digitsAt(text, at + CHECK_FIELD.length, text.length - 1);
  if (Number.isNaN(check)) return null;
  const seqAt = text.lastIndexOf(SEQ_FIELD, at);
  const seq = seqAt < 0 ? Number.NaN : digitsAt(text, seqAt + SEQ_FIELD.length, at);
  if (crc32Text(text, 0, at, CLOSE_BRACE) === check && !Number.isNaN(seq)) return { body: `${text.slice(0, seqAt)}}`, seq, intact: true };
  return { body: `${text.slice(0, at)}}`, seq: Number.NaN, intact: false };
}
