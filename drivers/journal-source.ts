/**
 * A recorded journal as a reading source: its readings and faults come out again at their
 * recorded pace (× `speed`), or all at once, on an injected scheduler — the same interface as
 * a port, so a dashboard or a pipeline cannot tell a replay from a live run.
 */
import { asyncScheduler, BehaviorSubject, Observable, type SchedulerLike } from 'rxjs';
import { createInputReader, type JournalRecord } from '../src/journal/journal-format.ts';
import type { Fault, InstrumentReading, ReadingSource, SourceStatus } from '../src/pipeline/types.ts';

export interface JournalSourceOptions {
  /** Multiple of the recorded pace; Infinity: as fast as the scheduler runs (default 1). */
  speed?: number;
  scheduler?: SchedulerLike;
}

export function createJournalSource(records: readonly JournalRecord[], options: JournalSourceOptions = {}): ReadingSource {
  const speed = options.speed ?? 1;
  if (!(speed > 0)) throw new RangeError(`speed must be positive, got ${speed}`);
  const scheduler = options.scheduler ?? asyncScheduler;
  const items: (InstrumentReading | Fault)[] = [];
  const read = createInputReader();
  for (const record of records) {
    const input = read(record);
    if (input && (input.kind === 'reading' || input.kind === 'spectrum' || input.kind === 'fault')) items.push(input);
  }
  const status = new BehaviorSubject<SourceStatus>({ state: 'connecting' });
  const readings = new Observable<InstrumentReading | Fault>((subscriber) => {
    status.next({ state: 'connected', detail: `journal, ${items.length} readings, ${speed}× its pace` });
    const first = items[0];
    const origin = first ? timeOf(first) : 0;
    let i = 0;
    const startMs = scheduler.now();
    let work = scheduler.schedule(function emit() {
      const dueS = Number.isFinite(speed) ? ((scheduler.now() - startMs) / 1000) * speed : Number.POSITIVE_INFINITY;
      while (i < items.length && timeOf(items[i] as InstrumentReading | Fault) - origin <= dueS) subscriber.next(items[i++] as InstrumentReading | Fault);
      if (i >= items.length) {
        status.next({ state: 'lost', closedByUs: true, detail: 'end of the journal' });
        status.complete();
        subscriber.complete();
        return;
      }
      const next = timeOf(items[i] as InstrumentReading | Fault) - origin;
      work = scheduler.schedule(emit, Math.max(0, ((next - dueS) / speed) * 1000));
    });
    return () => work.unsubscribe();
  });
  return { readings, status };
}

function timeOf(item: InstrumentReading | Fault): number {
  return item.kind === 'fault' ? item.arrivalS : item.timeS;
}
