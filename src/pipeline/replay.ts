/**
 * Replaying a journal: its inputs, in their order, through a controller (the recorded recipe or
 * a changed one), and where the replayed controller cuts compared with where the run did.
 * With the recorded recipe every decision is reproduced exactly: the controller is a pure
 * function of its inputs, and the journal holds all of them, ticks included.
 */
import { createInputReader, type JournalMark, type JournalRecord } from '../journal/journal-format.ts';
import type { Controller, ControllerState } from './controller.ts';
import type { RunEvent } from './events.ts';
import { runPaced, type SteppedRun } from './run-stepped.ts';
import type { PipelineInput } from './types.ts';

type CutEvent = Extract<RunEvent, { type: 'cut' }>;

export interface CutComparison {
  layer: number;
  recorded: Pick<CutEvent, 'timeS' | 'signal' | 'estimatedNm' | 'reason'> | null;
  replayed: Pick<CutEvent, 'timeS' | 'signal' | 'estimatedNm' | 'reason'> | null;
  /** replayed − recorded, s (NaN when either is missing). */
  deltaTimeS: number;
  deltaEstimatedNm: number;
  differs: boolean;
}

export interface ReplayResult {
  state: ControllerState;
  events: RunEvent[];
  recordedEvents: RunEvent[];
  /** The journal's notes on the run itself: where resumed sessions took it up. */
  marks: JournalMark[];
  cuts: CutComparison[];
  /** Readings and other inputs fed. */
  inputs: number;
  /** The first event of the replay that differs from the journal's, if any. */
  firstDifference: { index: number; recorded: RunEvent | null; replayed: RunEvent | null } | null;
}

/**
 * Feeds every input of `records` to `controller`. The journal's own readings do not answer the
 * replayed controller's shutter commands — the chamber's response is what was recorded — so a
 * changed recipe shows where it would have cut on the same signal. The records are taken one by
 * one (a journal read as a stream is never held whole); the recorded events are kept.
 */
export function replayJournal(records: Iterable<JournalRecord>, controller: Controller, onEvent?: (event: RunEvent) => void): ReplayResult {
  const replay = collect(records, controller, onEvent);
  replay.run.runUntil(Number.POSITIVE_INFINITY);
  return replay.result();
}

/**
 * The same, paced: each input is fed when `speed` × the wall time since the start has reached
 * its recorded time (the dashboard watches a replay as it would a run).
 */
export async function replayJournalPaced(
  records: Iterable<JournalRecord>,
  controller: Controller,
  speed: number,
  onEvent?: (event: RunEvent) => void,
): Promise<ReplayResult> {
  const replay = collect(records, controller, onEvent);
  await runPaced(replay.run, speed);
  return replay.result();
}

type InputRecord = Extract<JournalRecord, { k: 'r' | 'i' | 's' }>;
/** What a replay hands to `onRecord`: not fed, and not a grid (which the spectra after it need). */
type OtherRecord = Exclude<JournalRecord, InputRecord | { k: 'g' }>;

/**
 * A journal's inputs as a stepped run (recorded events and marks passed to `onRecord`, not fed),
 * to be run at full speed or spread over wall time by `runPaced`. Records are pulled from
 * `records` one ahead of the run.
 */
export function createJournalRun(
  records: Iterable<JournalRecord>,
  controller: Controller,
  callbacks: { onInput?: (input: PipelineInput) => void; onEvent?: (event: RunEvent) => void; onRecord?: (record: OtherRecord) => void } = {},
): SteppedRun {
  const iterator = records[Symbol.iterator]();
  let state: ControllerState = controller.initial();
  let next: InputRecord | undefined;
  let ended = false;
  let now = 0;
  const read = createInputReader();
  const apply = (input: PipelineInput): void => {
    callbacks.onInput?.(input);
    const result = controller.step(state, input);
    state = result.state;
    for (const event of result.events) callbacks.onEvent?.(event);
  };
  const peek = (): InputRecord | undefined => {
    while (next === undefined && !ended) {
      const item = iterator.next();
      if (item.done) ended = true;
      else if (item.value.k === 'r' || item.value.k === 'i' || item.value.k === 's') next = item.value;
      else if (item.value.k === 'g') read(item.value);
      else callbacks.onRecord?.(item.value);
    }
    return next;
  };
  const running = (): boolean => peek() !== undefined && state.phase !== 'finished' && state.phase !== 'aborted';
  return {
    get state() {
      return state;
    },
    get nowS() {
      return now;
    },
    get running() {
      return running();
    },
    apply,
    runUntil(untilS) {
      while (running()) {
        const record = next as InputRecord;
        if (record.t > untilS) break;
        next = undefined;
        const input = read(record);
        if (input) apply(input);
        now = Math.max(now, record.t);
      }
      if (Number.isFinite(untilS) && running()) now = Math.max(now, untilS);
    },
  };
}

/**
 * A journal's inputs through `controller` to the run's end (`attach` sees the run before it
 * steps), then the records after that end read too, so that the journal's report covers the
 * whole file (damage after the run's end included).
 */
export function runJournalToEnd(
  records: Iterable<JournalRecord>,
  controller: Controller,
  callbacks: Parameters<typeof createJournalRun>[2] = {},
  attach?: (run: SteppedRun) => void,
): SteppedRun {
  const iterator = records[Symbol.iterator]();
  const run = createJournalRun({ [Symbol.iterator]: () => iterator }, controller, callbacks);
  attach?.(run);
  run.runUntil(Number.POSITIVE_INFINITY);
  for (let item = iterator.next(); !item.done; item = iterator.next()) {
    // Read for the report only.
  }
  return run;
}

function collect(records: Iterable<JournalRecord>, controller: Controller, onEvent?: (event: RunEvent) => void): { run: SteppedRun; result(): ReplayResult } {
  const events: RunEvent[] = [];
  const recordedEvents: RunEvent[] = [];
  const marks: JournalMark[] = [];
  let inputs = 0;
  const onRecord = (r: OtherRecord): void => {
    if (r.k === 'e') recordedEvents.push(r.event);
    else marks.push(r);
  };
  // One pass over the records: what the run leaves unread (after its end) is read for its events.
  const iterator = records[Symbol.iterator]();
  const run = createJournalRun({ [Symbol.iterator]: () => iterator }, controller, {
    onInput: () => inputs++,
    onEvent: (e) => {
      events.push(e);
      onEvent?.(e);
    },
    onRecord,
  });
  return {
    run,
    result: () => {
      for (let item = iterator.next(); !item.done; item = iterator.next()) if (item.value.k === 'e' || item.value.k === 'm') onRecord(item.value);
      return { state: run.state, events, recordedEvents, marks, cuts: compareCuts(recordedEvents, events), inputs, firstDifference: firstDifference(recordedEvents, events) };
    },
  };
}

function compareCuts(recorded: readonly RunEvent[], replayed: readonly RunEvent[]): CutComparison[] {
  const byLayer = (events: readonly RunEvent[]): Map<number, CutEvent> => {
    const m = new Map<number, CutEvent>();
    for (const e of events) if (e.type === 'cut') m.set(e.layer, e);
    return m;
  };
  const a = byLayer(recorded);
  const b = byLayer(replayed);
  const layers = [...new Set([...a.keys(), ...b.keys()])].sort((x, y) => x - y);
  return layers.map((layer) => {
    const r = a.get(layer);
    const p = b.get(layer);
    const pick = (e: CutEvent | undefined) => (e ? { timeS: e.timeS, signal: e.signal, estimatedNm: e.estimatedNm, reason: e.reason } : null);
    const differs = !r || !p || r.timeS !== p.timeS || r.reason !== p.reason || r.estimatedNm !== p.estimatedNm;
    return {
      layer,
      recorded: pick(r),
      replayed: pick(p),
      deltaTimeS: r && p ? p.timeS - r.timeS : Number.NaN,
      deltaEstimatedNm: r && p ? p.estimatedNm - r.estimatedNm : Number.NaN,
      differs,
    };
  });
}

function firstDifference(recorded: readonly RunEvent[], replayed: readonly RunEvent[]): ReplayResult['firstDifference'] {
  const n = Math.max(recorded.length, replayed.length);
  for (let i = 0; i < n; i++) {
    const a = recorded[i];
    const b = replayed[i];
    if (JSON.stringify(a) !== JSON.stringify(b)) return { index: i, recorded: a ?? null, replayed: b ?? null };
  }
  return null;
}
