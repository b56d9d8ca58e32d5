/**
 * Running the controller against a chamber that can be stepped in simulated time (the virtual
 * chamber, or a replayed journal): no scheduler and no wall clock inside, so decisions are
 * exactly those of a live run fed the same inputs. At full speed it runs as fast as the CPU
 * allows; `runPaced` spreads the same steps over wall time at a chosen multiple of real time.
 */
import type { Controller, ControllerState } from './controller.ts';
import type { RunEvent } from './events.ts';
import type { PipelineInput, Reading, ShutterAck, ShutterCommand } from './types.ts';

/** A source that produces its readings on demand in its own time. */
export interface SteppedChamber {
  nextReadingTimeS(): number;
  advance(untilS: number, sink: (reading: Reading) => void): void;
  command(command: ShutterCommand): void;
  takeAcks(): ShutterAck[];
}

export interface SteppedRunOptions {
  /** Inputs at set times besides the chamber's (operator commands); sorted by time here. */
  inject?: readonly PipelineInput[];
  /** Let silence be noticed: a tick at least this often in run time (default 0.5 s). */
  tickS?: number;
  /** Stop at this run time whatever happens (default: 4 × the planned duration). */
  maxS?: number;
  onInput?: (input: PipelineInput) => void;
  onEvent?: (event: RunEvent) => void;
}

export interface SteppedRun {
  readonly state: ControllerState;
  /** Run time reached, s. */
  readonly nowS: number;
  /** False once the run has finished, been aborted, or reached `maxS`. */
  readonly running: boolean;
  /** Steps until run time `untilS` (or the end). */
  runUntil(untilS: number): void;
  /** An input from outside (an operator command), applied now. */
  apply(input: PipelineInput): void;
}

export function createSteppedRun(controller: Controller, chamber: SteppedChamber, options: SteppedRunOptions = {}): SteppedRun {
  const tickS = options.tickS ?? 0.5;
  let state = controller.initial();
  const maxS = options.maxS ?? 4 * state.plan.durationS;
  const pending = [...(options.inject ?? [])].sort((a, b) => timeOf(a) - timeOf(b));
  let now = 0;

  const apply = (input: PipelineInput): void => {
    options.onInput?.(input);
    const result = controller.step(state, input);
    state = result.state;
    for (const event of result.events) {
      if (event.type === 'shutter') chamber.command(event.command);
      options.onEvent?.(event);
    }
  };
  const running = (): boolean => state.phase !== 'finished' && state.phase !== 'aborted' && now < maxS;

  apply({ kind: 'operator', action: 'start', timeS: 0 });
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
    runUntil(untilS: number): void {
      while (running() && now < untilS) {
        const due = Math.min(chamber.nextReadingTimeS(), now + tickS, timeOf(pending[0]), untilS);
        while (pending.length > 0 && timeOf(pending[0]) <= due) apply(pending.shift() as PipelineInput);
        chamber.advance(due, apply);
        for (const ack of chamber.takeAcks()) apply(ack);
        if (due > state.nowS) apply({ kind: 'tick', timeS: due });
        now = due;
      }
    },
  };
}

/** Runs to the end at full speed and returns the final state. */
export function runStepped(controller: Controller, chamber: SteppedChamber, options: SteppedRunOptions = {}): ControllerState {
  const run = createSteppedRun(controller, chamber, options);
  run.runUntil(Number.POSITIVE_INFINITY);
  return run.state;
}

/**
 * Runs at `speed` × real time (Infinity: full speed, yielding to the event loop between
 * chunks), calling `onChunk` after each chunk of run time. `signal` stops it early.
 */
export async function runPaced(
  run: SteppedRun,
  speed: number,
  options: { chunkS?: number; onChunk?: (run: SteppedRun) => void; signal?: AbortSignal } = {},
): Promise<void> {
  const chunkS = options.chunkS ?? (Number.isFinite(speed) ? Math.max(0.05, 0.05 * speed) : 60);
  const startMs = performance.now();
  while (run.running && !options.signal?.aborted) {
    run.runUntil(run.nowS + chunkS);
    options.onChunk?.(run);
    const aheadMs = Number.isFinite(speed) ? (run.nowS / speed) * 1000 - (performance.now() - startMs) : 0;
    await new Promise((resolve) => setTimeout(resolve, Math.max(0, aheadMs)));
  }
}

function timeOf(input: PipelineInput | undefined): number {
  if (input === undefined) return Number.POSITIVE_INFINITY;
  return input.kind === 'fault' ? input.arrivalS : input.timeS;
}
