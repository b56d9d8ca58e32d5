/**
 * The virtual chamber in process behind the same interface as a real instrument: a reading
 * source and a shutter sink, advanced by an injected scheduler at `speed` × real time (tests run
 * it on virtual time). For full speed without a scheduler, step it directly (run-stepped.ts).
 */
import { asyncScheduler, BehaviorSubject, Observable, Subject, type SchedulerLike } from 'rxjs';
import type { InstrumentReading, ReadingSource, ShutterAck, ShutterCommand, ShutterFault, ShutterSink, SourceStatus } from '../src/pipeline/types.ts';
import type { VirtualChamber } from './virtual-chamber.ts';

export interface ChamberSourceOptions {
  /** Multiple of real time (default 1). */
  speed?: number;
  /** How often the chamber is advanced, ms of scheduler time (default 20). */
  periodMs?: number;
  scheduler?: SchedulerLike;
}

export function createChamberSource(chamber: VirtualChamber, options: ChamberSourceOptions = {}): ReadingSource & ShutterSink & { stop(): void } {
  const speed = options.speed ?? 1;
  if (!(speed > 0 && Number.isFinite(speed))) throw new RangeError(`speed must be a positive finite number, got ${speed}`);
  const scheduler = options.scheduler ?? asyncScheduler;
  const periodMs = options.periodMs ?? 20;
  const status = new BehaviorSubject<SourceStatus>({ state: 'connected', detail: `virtual chamber at ${speed}× real time` });
  const acks = new Subject<ShutterAck>();
  // In process, a command always reaches the chamber: a refused one is simply never acknowledged.
  const faults = new Subject<ShutterFault>();
  let stopped = false;
  const readings = new Observable<InstrumentReading>((subscriber) => {
    const startMs = scheduler.now();
    // A fresh action each period (not a re-scheduled one: a virtual-time scheduler chains those
    // into one deep subscription).
    let work = scheduler.schedule(function advance() {
      if (stopped) {
        subscriber.complete();
        return;
      }
      const emit = (r: InstrumentReading): void => subscriber.next(r);
      chamber.advance(((scheduler.now() - startMs) / 1000) * speed, emit, emit);
      for (const ack of chamber.takeAcks()) acks.next(ack);
      work = scheduler.schedule(advance, periodMs);
    }, 0);
    return () => work.unsubscribe();
  });
  return {
    readings,
    status,
    acks,
    faults,
    send(command: ShutterCommand) {
      chamber.command({ ...command, timeS: Math.max(command.timeS, chamber.timeS) });
    },
    stop() {
      stopped = true;
      status.next({ state: 'lost', closedByUs: true, detail: 'stopped' });
      status.complete();
      acks.complete();
      faults.complete();
    },
  };
}
