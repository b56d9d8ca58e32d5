/**
 * The run journal: append-only NDJSON, one record a line, a format version in the first line.
 * Readings are compact (they are most of the file); inputs and events are stored whole.
 *
 *   {"journal":"fringe","version":1,"runId":"…","startedAt":"…","recipe":"…",…}   first line
 *   {"k":"r","c":"o","t":12.3,"v":0.91234,"a":12.3}     reading (c: o optical, x crystal)
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
import type { PipelineInput, Reading } from '../pipeline/types.ts';

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

export type JournalRecord =
  | { readonly k: 'r'; readonly c: 'o' | 'x'; readonly t: number; readonly v: number; readonly a: number }
  | { readonly k: 'i'; readonly t: number; readonly input: Exclude<PipelineInput, Reading> }
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
    case 'i':
      return typeof value.t === 'number' && isObject(value.input) && typeof value.input.kind === 'string' && value.input.kind !== 'reading';
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

export function recordToInput(record: JournalRecord): PipelineInput | undefined {
  if (record.k === 'r') {
    return { kind: 'reading', channel: record.c === 'o' ? 'optical' : 'crystal', value: record.v, timeS: record.t, arrivalS: record.a };
  }
  if (record.k === 'i') return record.input;
  return undefined;
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
