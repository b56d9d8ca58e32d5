/**
 * Replaying a journal: its inputs, in their order, through a controller (the recorded recipe or
 * a changed one), and where the replayed controller cuts compared with where the run did.
 * With the recorded recipe every decision is reproduced exactly: the controller is a pure
 * function of its inputs, and the journal holds all of them, ticks included.
 */
import { recordToInput, type JournalRecord } from '../journal/journal-format.ts';
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
  cuts: CutComparison[];
  /** Readings and other inputs fed. */
  inputs: number;
  /** The first event of the replay that differs from the journal's, if any. */
  firstDifference: { index: number; recorded: RunEvent | null; replayed: RunEvent | null } | null;
}

/**
 * Feeds every input of `records` to `controller`. The journal's own readings do not answer the
 * replayed controller's shutter commands — the chamber's response is what was recorded — so a
 * changed recipe shows where it would have cut on the same signal.
 */
export function replayJournal(records: readonly JournalRecord[], controller: Controller, onEvent?: (event: RunEvent) => void): ReplayResult {
  const replay = collect(records, controller, onEvent);
  replay.run.runUntil(Number.POSITIVE_INFINITY);
  return replay.result();
}

/**
 * The same, paced: each input is fed when `speed` × the wall time since the start has reached
 * its recorded time (the dashboard watches a replay as it would a run).
 */
export async function replayJournalPaced(
  records: readonly JournalRecord[],
  controller: Controller,
  speed: number,
  onEvent?: (event: RunEvent) => void,
): Promise<ReplayResult> {
  const replay = collect(records, controller, onEvent);
  await runPaced(replay.run, speed);
  return replay.result();
}

/**
 * A journal's inputs as a stepped run (recorded events skipped), to be run at full speed or
 * spread over wall time by `runPaced`.
 */
export function createJournalRun(
  records: readonly JournalRecord[],
  controller: Controller,
  callbacks: { onInput?: (input: PipelineInput) => void; onEvent?: (event: RunEvent) => void } = {},
): SteppedRun {
  let state: ControllerState = controller.initial();
  let next = 0;
  let now = 0;
  const apply = (input: PipelineInput): void => {
    callbacks.onInput?.(input);
    const result = controller.step(state, input);
    state = result.state;
    for (const event of result.events) callbacks.onEvent?.(event);
  };
  const skipEvents = (): void => {
    while (next < records.length && (records[next] as JournalRecord).k === 'e') next++;
  };
  const running = (): boolean => {
    skipEvents();
    return next < records.length && state.phase !== 'finished' && state.phase !== 'aborted';
  };
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
        const record = records[next] as Exclude<JournalRecord, { k: 'e' }>;
        if (record.t > untilS) break;
        next++;
        const input = recordToInput(record);
        if (input) apply(input);
        now = Math.max(now, record.t);
      }
      if (Number.isFinite(untilS) && running()) now = Math.max(now, untilS);
    },
  };
}


function collect(records: readonly JournalRecord[], controller: Controller, onEvent?: (event: RunEvent) => void): { run: SteppedRun; result(): ReplayResult } {
  const events: RunEvent[] = [];
  let inputs = 0;
  const run = createJournalRun(records, controller, {
    onInput: () => inputs++,
    onEvent: (e) => {
      events.push(e);
      onEvent?.(e);
    },
  });
  const recordedEvents = records.flatMap((r): RunEvent[] => (r.k === 'e' ? [r.event] : []));
  return {
    run,
    result: () => ({ state: run.state, events, recordedEvents, cuts: compareCuts(recordedEvents, events), inputs, firstDifference: firstDifference(recordedEvents, events) }),
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
