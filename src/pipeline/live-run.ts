/**
 * A live run: the instruments' readings, the shutters' acknowledgements and the operator's
 * commands merged onto one run clock, ticks added through silence, the controller deciding, and
 * every shutter command sent the moment it is decided (before anything is written down).
 */
import { asyncScheduler, map, merge, share, tap, type Observable, type SchedulerLike } from 'rxjs';
import type { Controller, ControllerState } from './controller.ts';
import { decide, toRunClock, withTicks, type Decision, type RunClock } from './operators/index.ts';
import type { OperatorAction, PipelineInput, ReadingSource, ShutterSink } from './types.ts';

export interface LiveRunOptions {
  controller: Controller;
  sources: readonly ReadingSource[];
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

  const readings = merge(...options.sources.map((s) => s.readings)).pipe(toRunClock(runClock, startArrivalS, options.instrumentOriginS));
  const acks = options.shutter.acks.pipe(map((ack): PipelineInput => ({ ...ack, timeS: Math.max(lastRunS, 0) })));
  const commands = options.commands.pipe(
    map((c): PipelineInput => ({ kind: 'operator', action: c.action, ...(c.alertId !== undefined ? { alertId: c.alertId } : {}), timeS: lastRunS })),
  );
  // Silence advances the run clock with the host's, from the last input.
  const tickTime = (): number => lastRunS + (clock() - lastArrivalS);

  const decisions = merge(readings, acks, commands).pipe(
    withTicks(options.tickMs ?? 500, tickTime, options.scheduler ?? asyncScheduler),
    decide(options.controller, options.resumeFrom),
    tap((decision) => {
      // The run clock is the controller's: a reading it refused (a time that jumped) moves neither it nor the ticks.
      if (decision.state.nowS > lastRunS) {
        lastRunS = decision.state.nowS;
        lastArrivalS = clock();
      }
      for (const event of decision.events) if (event.type === 'shutter') options.shutter.send(event.command);
    }),
    share(),
  );
  return { decisions };
}
