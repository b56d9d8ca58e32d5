/**
 * The run journal: append-only NDJSON, one record a line, a format version in the first line.
 * Readings are compact (they are most of the file); inputs and events are stored whole.
 *
 *   {"journal":"fringe","version":1,"runId":"…","startedAt":"…","recipe":"…",…}   first line
 *   {"k":"r","c":"o","t":12.3,"v":0.91234,"a":12.3}     reading (c: o optical, x crystal)
 *   {"k":"i","t":12.4,"input":{…}}                      another input (operator, fault, ack)
 *   {"k":"e","event":{…}}                                 an event the controller decided
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

export type JournalRecord =
  | { readonly k: 'r'; readonly c: 'o' | 'x'; readonly t: number; readonly v: number; readonly a: number }
  | { readonly k: 'i'; readonly t: number; readonly input: Exclude<PipelineInput, Reading> }
  | { readonly k: 'e'; readonly event: RunEvent };

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

export function parseRecord(line: string): unknown {
  return JSON.parse(line, (_key, value: unknown) => (typeof value === 'string' && value in NON_FINITE ? NON_FINITE[value] : value));
}
