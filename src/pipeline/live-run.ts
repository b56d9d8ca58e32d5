/**
 * A live run: the instruments' readings, the links' losses and returns, the shutters'
 * confirmations and failures and the operator's commands merged onto one run clock, ticks added
 * through silence, the controller deciding, and every shutter command sent the moment it is
 * decided (before anything is written down).
 */
import { asyncScheduler, distinctUntilChanged, filter, map, merge, share, startWith, tap, type Observable, type SchedulerLike } from 'rxjs';
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
  /** Tick after this much silence, ms of host time at the run clock's pace of 1 (default 500 ms). */
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
  /**
   * Run seconds per host second. 1 on the arrival clock; on the instrument clock, measured from
   * the readings taken over windows of PACE_WINDOW_S host seconds (a virtual chamber runs at any
   * multiple of real time), so that ticks carry the run clock through silence at the
   * instruments' own pace and their readings after a gap come back on time. Taken a little low
   * (PACE_MARGIN).
   */
  let pace = 1;
  const tickMs = options.tickMs ?? 500;
  let paceFrom: { runS: number; arrivalS: number } | undefined;

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
  // Silence advances the run clock with the host's, at the instruments' pace, from the last input.
  const tickTime = (): number => lastRunS + (clock() - lastArrivalS) * pace;

  const inputs = merge(readings, acks, faults, ...links, commands);
  const decisions = (options.resumeFrom ? inputs.pipe(startWith<PipelineInput>({ kind: 'resumed', timeS: resumedAt })) : inputs).pipe(
    // The same run time between ticks at any pace, but never within the gaps of an instrument's
    // usual delivery (a chamber writing its lines every few tens of ms).
    withTicks(() => Math.max(MIN_TICK_MS, tickMs / pace), tickTime, options.scheduler ?? asyncScheduler, options.scheduler ? undefined : setImmediate),
    decide(options.controller, options.resumeFrom),
    tap((decision) => {
      for (const event of decision.events) if (event.type === 'shutter') options.shutter.send(event.command);
      // The run clock is the controller's: a reading it refused (a time that jumped) moves neither it nor the ticks.
      if (decision.state.nowS > lastRunS) {
        lastRunS = decision.state.nowS;
        lastArrivalS = clock();
        if (runClock === 'instrument' && decision.input.kind === 'reading') measurePace();
      }
    }),
    share(),
  );
  return { decisions };

  /** The pace over the last window of readings taken (kept within 0.01–10,000). */
  function measurePace(): void {
    paceFrom ??= { runS: lastRunS, arrivalS: lastArrivalS };
    const hostS = lastArrivalS - paceFrom.arrivalS;
    if (hostS < PACE_WINDOW_S) return;
    pace = Math.min(10_000, Math.max(0.01, (PACE_MARGIN * (lastRunS - paceFrom.runS)) / hostS));
    paceFrom = { runS: lastRunS, arrivalS: lastArrivalS };
  }
}

/**
 * The pace is taken this much low: a tick that lags notices silence a little late (and a
 * reading after a long silence lands within `timeJumpS` ahead), one that leads would refuse the
 * readings it passed. The measured pace is good to about 1 % (a delivery's gap over the window).
 */
const PACE_MARGIN = 0.98;
/** Host seconds over which the instruments' pace is measured. */
const PACE_WINDOW_S = 2;
/** Shortest silence that is ticked through, ms of host time. */
const MIN_TICK_MS = 100;
