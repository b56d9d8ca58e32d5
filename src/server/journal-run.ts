/**
 * A recorded run played back through the controller: the journal's inputs, in their order, as
 * a stepped run that `runPaced` spreads over wall time. With the recipe as run every decision is
 * the recorded one (the controller is a pure function of its inputs, ticks included), so the
 * dashboard shows the run as it was, at a chosen speed.
 */
import { readFileSync } from 'node:fs';
import { readJournal } from '../journal/journal-reader.ts';
import { recordToInput, type JournalRecord } from '../journal/journal-format.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { createController, type Controller, type ControllerState } from '../pipeline/controller.ts';
import type { RunEvent } from '../pipeline/events.ts';
import { runPaced, type SteppedRun } from '../pipeline/run-stepped.ts';
import type { PipelineInput } from '../pipeline/types.ts';
import { createRunHub, type RunHub } from './run-hub.ts';
import type { RunFolder } from './run-store.ts';

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

export interface JournalReplay {
  readonly hub: RunHub;
  readonly run: SteppedRun;
  readonly done: Promise<void>;
}

/** Replays a run folder (it needs its `recipe.json`) at `speed` × real time into a fresh hub. */
export function startJournalReplay(folder: RunFolder, speed: number, signal?: AbortSignal): JournalReplay {
  const journal = readJournal(folder.journalFile);
  const recipe = JSON.parse(readFileSync(folder.recipeFile, 'utf8')) as ResolvedRecipe;
  const hub = createRunHub({ recipe, source: 'replay', runId: folder.id, speed });
  const run = createJournalRun(journal.records, createController(recipe), { onInput: hub.feed.input, onEvent: hub.feed.event });
  hub.attach(run);
  const done = runPaced(run, speed, signal ? { signal } : {});
  return { hub, run, done };
}
