/**
 * A live run: the instruments' readings, the links' losses and returns, the shutters'
 * confirmations and failures and the operator's commands merged onto one run clock, ticks added
 * through silence, the controller deciding, and every shutter command sent the moment it is
 * decided (before anything is written down).
 */
import { asyncScheduler, distinctUntilChanged, filter, map, merge, share, tap, type Observable, type SchedulerLike } from 'rxjs';
import type { Controller, ControllerState } from './controller.ts';
import { decide, toRunClock, withTicks, type Decision, type RunClock } from './operators/index.ts';
import type { OperatorAction, PipelineInput, ReadingSource, ShutterSink, SourceStatus } from './types.ts';

export interface LiveRunOptions {
  controller: Controller;
  /** The instruments, by their id in the chamber file. */
  sources: ReadonlyMap<string, ReadingSource>;
  /** Other links whose losses are alerted (a shutter controller on its own port), by name. */
  links?: ReadonlyMap<string, Observable<SourceStatus>>;
  shutter: ShutterSink;
  /** What the operator asks for; the wiring stamps the run time. */
  commands: Observable<{ action: OperatorAction; alertId?: string }>;
  /** `arrival` (default): the host's clock; `instrument`: the readings' own timestamps. */
  runClock?: RunClock;
  /** Host monotonic seconds (default performance.now() / 1000). */
  clock?: () => number;
  /** Tick after this much silence (default 500 ms). */
  tickMs?: number;
  scheduler?: SchedulerLike;
  /** Resume: the state rebuilt from a journal; run time continues from its `nowS`. */
  resumeFrom?: ControllerState;
  /** Instrument clock: the instrument time that is run time 0 (default 0). */
  instrumentOriginS?: number;
}

export interface LiveRun {
  /** Every decision, shared: subscribe to start the run; the shutter commands go out inside. */
  readonly decisions: Observable<Decision>;
}

export function createLiveRun(options: LiveRunOptions): LiveRun {
  const clock = options.clock ?? ((): number => performance.now() / 1000);
  const runClock = options.runClock ?? 'arrival';
  const resumeAtS = options.resumeFrom?.nowS ?? 0;
  const resumedAt = Number.isFinite(resumeAtS) ? resumeAtS : 0;
  // Run time 0 (or the resumed run's time) is now on the host's clock.
  const startArrivalS = clock() - resumedAt;
  let lastRunS = resumedAt;
  let lastArrivalS = clock();

  const sources = [...options.sources];
  const readings = merge(...sources.map(([, s]) => s.readings)).pipe(toRunClock(runClock, startArrivalS, options.instrumentOriginS));
  // Inputs from outside the instruments' lines happen now on the run clock.
  const nowInput = <T extends PipelineInput>(input: T): T => ({ ...input, timeS: Math.max(lastRunS, 0) });
  const acks = options.shutter.acks.pipe(map(nowInput));
  const faults = options.shutter.faults.pipe(map(nowInput));
  // A link we did not close going away, and its return; staleness is the controller's own to see.
  const statuses: [string, Observable<SourceStatus>][] = [...sources.map(([id, source]): [string, Observable<SourceStatus>] => [id, source.status]), ...(options.links ?? [])];
  const links = statuses.map(([id, status]) =>
    status.pipe(
      filter((s) => (s.state === 'lost' && !s.closedByUs) || s.state === 'connected'),
      map((s): PipelineInput => ({ kind: 'link', link: id, state: s.state === 'lost' ? 'lost' : 'connected', detail: s.detail ?? '', timeS: 0 })),
      distinctUntilChanged((a, b) => a.kind === 'link' && b.kind === 'link' && a.state === b.state),
      map(nowInput),
    ),
  );
  const commands = options.commands.pipe(
    map((c): PipelineInput => ({ kind: 'operator', action: c.action, ...(c.alertId !== undefined ? { alertId: c.alertId } : {}), timeS: lastRunS })),
  );
  // Silence advances the run clock with the host's, from the last input.
  const tickTime = (): number => lastRunS + (clock() - lastArrivalS);

  const decisions = merge(readings, acks, faults, ...links, commands).pipe(
    withTicks(options.tickMs ?? 500, tickTime, options.scheduler ?? asyncScheduler),
    decide(options.controller, options.resumeFrom),
    tap((decision) => {
      for (const event of decision.events) if (event.type === 'shutter') options.shutter.send(event.command);
      // The run clock is the controller's: a reading it refused (a time that jumped) moves neither it nor the ticks.
      if (decision.state.nowS > lastRunS) {
        lastRunS = decision.state.nowS;
        lastArrivalS = clock();
      }
    }),
    share(),
  );
  return { decisions };
}
