/**
 * Driving a live run from start to its end, whatever the end: the run completing or aborted,
 * the controller failing, the instruments never answering, a signal, or an error escaping
 * anywhere in the process. Every way out asks every source's shutter to close (unless the run
 * completed with every close confirmed), waits a bounded time for the confirmations, and says
 * truthfully which came.
 */
import type { EventEmitter } from 'node:events';
import type { Subject } from 'rxjs';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import type { ControllerState } from '../pipeline/controller.ts';
import type { LiveRun } from '../pipeline/live-run.ts';
import type { Decision } from '../pipeline/operators/index.ts';
import type { OperatorAction, ShutterSink } from '../pipeline/types.ts';
import type { CommandIo } from './command-io.ts';

/** A shutter sink that can say which closes are still unconfirmed (the shutter output). */
export type ConfirmingShutters = ShutterSink & {
  unconfirmedCloses(): string[];
  settled(timeoutMs: number): Promise<string[]>;
};

export interface DriveRunOptions {
  live: LiveRun;
  /** Where operator commands enter the run (the abort on a signal goes here). */
  commands: Subject<{ action: OperatorAction; alertId?: string }>;
  shutter: ConfirmingShutters;
  recipe: ResolvedRecipe;
  /** The state the run starts from (a resumed run's). */
  initial: ControllerState;
  /** Resolves when the run may start, rejects with the reason it cannot (instruments silent). */
  ready: Promise<void>;
  /** Send `start` once ready (not when resuming a run already started). */
  start: boolean;
  /** Each decision, to be recorded; a throw here is reported and the run goes on. */
  onDecision(decision: Decision): void;
  io: CommandIo;
  /** How long the way out waits for the closes to be confirmed, s (default 10). */
  closeWaitS?: number;
  /** Where signals and escaped errors are heard (default the process). */
  events?: Pick<EventEmitter, 'on' | 'off'>;
}

export interface DriveRunResult {
  outcome: 'complete' | 'aborted' | 'stopped';
  /** Why the run stopped, when it neither completed nor was aborted. */
  reason?: string;
  /** Shutters whose close was not confirmed on the way out. */
  unconfirmed: string[];
  state: ControllerState;
}

export async function driveRun(options: DriveRunOptions): Promise<DriveRunResult> {
  const { live, commands, shutter, recipe, io } = options;
  const events = options.events ?? process;
  const closeWaitS = options.closeWaitS ?? 10;
  let state = options.initial;
  let outcome: DriveRunResult['outcome'] | undefined;
  let reason: string | undefined;
  let end: () => void = () => undefined;
  let stopWaiting: (() => void) | undefined;
  let signals = 0;

  const onSignal = (): void => {
    signals++;
    if (signals > 1) {
      stopWaiting?.();
      return;
    }
    io.err('aborting: every shutter is asked to close (press Ctrl-C again to stop waiting for the confirmations)');
    commands.next({ action: 'abort' });
    // Should the run have stopped deciding already, the way out closes the shutters all the same.
    reason ??= 'aborted by a signal';
    end();
  };
  // An error that escapes anywhere is a way out of the run too.
  const onEscape = (error: unknown): void => {
    reason ??= `an internal error: ${error instanceof Error ? error.message : String(error)}`;
    end();
  };
  const listeners = [
    ['SIGINT', onSignal],
    ['SIGTERM', onSignal],
    ['uncaughtException', onEscape],
    ['unhandledRejection', onEscape],
  ] as const;
  for (const [name, listener] of listeners) events.on(name, listener);

  let subscription: { unsubscribe(): void } | undefined;
  try {
    await new Promise<void>((resolve) => {
      end = resolve;
      subscription = live.decisions.subscribe({
        next(decision) {
          state = decision.state;
          try {
            options.onDecision(decision);
          } catch (error) {
            // Recording is not deciding: the run goes on, and says what it could not keep.
            io.err(`could not record a decision: ${(error as Error).message}`);
          }
          if (state.phase === 'finished' || state.phase === 'aborted') {
            outcome = state.phase === 'finished' ? 'complete' : 'aborted';
            resolve();
          }
        },
        error(error: unknown) {
          reason ??= `the controller failed: ${(error as Error).message}`;
          resolve();
        },
      });
      options.ready.then(
        () => {
          if (options.start) commands.next({ action: 'start' });
        },
        (error: unknown) => {
          reason ??= (error as Error).message;
          resolve();
        },
      );
    });
    subscription?.unsubscribe();
    outcome ??= 'stopped';
    if (outcome === 'stopped') io.err(`the run stopped: ${reason ?? 'no reason given'}`);

    let unconfirmed = shutter.unconfirmedCloses();
    if (outcome !== 'complete' || unconfirmed.length > 0) {
      const layer = recipe.layers[Math.min(state.index, recipe.layers.length - 1)]?.number ?? 1;
      const sources = [...new Set(recipe.layers.map((l) => l.materialName))];
      const timeS = Number.isFinite(state.nowS) ? state.nowS : 0;
      for (const source of sources) shutter.send({ kind: 'shutter', action: 'close', source, layer, timeS });
      io.err(`every shutter (${sources.join(', ')}) is asked to close; waiting up to ${closeWaitS} s for the confirmations`);
      unconfirmed = await Promise.race([
        shutter.settled(closeWaitS * 1000),
        new Promise<string[]>((resolve) => (stopWaiting = () => resolve(shutter.unconfirmedCloses()))),
      ]);
      if (unconfirmed.length === 0) io.err(`every shutter confirmed closed (${sources.join(', ')})`);
      else io.out(`ALERT critical close-unconfirmed: the close of ${unconfirmed.join(', ')} is NOT confirmed: close ${unconfirmed.length > 1 ? 'them' : 'it'} by hand`);
    }
    return { outcome, ...(reason !== undefined && outcome === 'stopped' ? { reason } : {}), unconfirmed, state };
  } finally {
    subscription?.unsubscribe();
    for (const [name, listener] of listeners) events.off(name, listener);
  }
}
