/**
 * A recorded run played back through the controller: the journal's inputs, in their order, as
 * a stepped run that `runPaced` spreads over wall time. With the recipe as run every decision is
 * the recorded one (the controller is a pure function of its inputs, ticks included), so the
 * dashboard shows the run as it was, at a chosen speed.
 */
import { readFileSync } from 'node:fs';
import { journalConfirmsCloses, journalEstimator } from '../journal/journal-format.ts';
import { openJournal } from '../journal/journal-reader.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { createController } from '../pipeline/controller.ts';
import { createJournalRun } from '../pipeline/replay.ts';
import { runPaced, type SteppedRun } from '../pipeline/run-stepped.ts';
import { createRunHub, type RunHub } from './run-hub.ts';
import type { RunFolder } from './run-store.ts';

export interface JournalReplay {
  readonly hub: RunHub;
  readonly run: SteppedRun;
  readonly done: Promise<void>;
}

/** Replays a run folder (it needs its `recipe.json`) at `speed` × real time into a fresh hub, reading its journal as it goes. */
export function startJournalReplay(folder: RunFolder, speed: number, signal?: AbortSignal): JournalReplay {
  const journal = openJournal(folder.journalFile);
  const recipe = JSON.parse(readFileSync(folder.recipeFile, 'utf8')) as ResolvedRecipe;
  const estimator = journalEstimator(journal.header);
  const hub = createRunHub({ recipe, source: 'replay', runId: folder.id, speed, estimator });
  const run = createJournalRun(journal.records, createController(recipe, { estimator, confirmCloses: journalConfirmsCloses(journal.header) }), { onInput: hub.feed.input, onEvent: hub.feed.event });
  hub.attach(run);
  const done = runPaced(run, speed, signal ? { signal } : {});
  return { hub, run, done };
}
