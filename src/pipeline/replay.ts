/**
 * Replaying a journal: its inputs, in their order, through a controller (the recorded recipe or
 * a changed one), and where the replayed controller cuts compared with where the run did.
 * With the recorded recipe every decision is reproduced exactly: the controller is a pure
 * function of its inputs, and the journal holds all of them, ticks included.
 */
import type { JournalRecord } from '../journal/journal-format.ts';
import { recordToInput } from '../journal/journal-format.ts';
import type { Controller, ControllerState } from './controller.ts';
import type { RunEvent } from './events.ts';

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
  const replay = createReplay(controller, onEvent);
  for (const record of records) replay.feed(record);
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
  const replay = createReplay(controller, onEvent);
  const startMs = performance.now();
  let origin: number | undefined;
  for (const record of records) {
    const t = record.k === 'e' ? undefined : record.t;
    if (t !== undefined && Number.isFinite(t)) {
      origin ??= t;
      const waitMs = ((t - origin) / speed) * 1000 - (performance.now() - startMs);
      if (waitMs > 5) await new Promise((resolve) => setTimeout(resolve, waitMs));
    }
    replay.feed(record);
  }
  return replay.result();
}

function createReplay(controller: Controller, onEvent?: (event: RunEvent) => void): { feed(record: JournalRecord): void; result(): ReplayResult } {
  let state = controller.initial();
  const events: RunEvent[] = [];
  const recordedEvents: RunEvent[] = [];
  let inputs = 0;
  return {
    feed(record) {
      if (record.k === 'e') {
        recordedEvents.push(record.event);
        return;
      }
      const input = recordToInput(record);
      if (!input) return;
      inputs++;
      const step = controller.step(state, input);
      state = step.state;
      for (const e of step.events) {
        events.push(e);
        onEvent?.(e);
      }
    },
    result: () => ({ state, events, recordedEvents, cuts: compareCuts(recordedEvents, events), inputs, firstDifference: firstDifference(recordedEvents, events) }),
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
