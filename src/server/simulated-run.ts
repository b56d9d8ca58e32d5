/**
 * A run on the virtual chamber behind a run hub, paced at a multiple of real time, optionally
 * recorded to `runs/<id>/` (journal, recipe as run, summary) like any other run.
 */
import { randomUUID } from 'node:crypto';
import { join } from 'node:path';
import { createVirtualChamber, type SimProfile } from '../../sim/index.ts';
import { createJournalWriter, type JournalWriter } from '../journal/journal-writer.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { createController, type ControllerOptions } from '../pipeline/controller.ts';
import type { RunEvent } from '../pipeline/events.ts';
import { createSteppedRun, runPaced, type SteppedRun } from '../pipeline/run-stepped.ts';
import { createRunHub, type RunHub, type RunHubOptions } from './run-hub.ts';
import { buildRunSummary, type RunSummary } from './run-summary.ts';

export interface SimulatedRunOptions {
  recipe: ResolvedRecipe;
  profile: SimProfile;
  /** Name of the profile for the journal (a file name). */
  profileName?: string;
  seed: number;
  /** Multiple of real time (Infinity: as fast as the CPU allows). */
  speed: number;
  /** Record the run in `<journalDir>/<run id>/`. */
  journalDir?: string;
  /**
   * Aborts the run: the controller's abort, as the operator's (every shutter closed, the abort
   * journalled), and the summary says `aborted`. A run already ended is left as it was.
   */
  signal?: AbortSignal;
  controller?: Partial<ControllerOptions>;
  hub?: Pick<RunHubOptions, 'pointsPerS' | 'maxTracePoints' | 'maxRatePoints' | 'maxLog'>;
  /** Run-time chunk between yields to the event loop, s (default: runPaced's). */
  chunkS?: number;
  /** More facts for the journal header's meta (the demo marks its runs `demo: true`). */
  meta?: Readonly<Record<string, unknown>>;
}

export interface SimulatedRun {
  readonly runId: string;
  readonly hub: RunHub;
  readonly run: SteppedRun;
  /** The run's folder when recorded. */
  readonly dir: string | null;
  /** Resolves with the summary when the run has ended (finished, aborted, stopped). */
  readonly done: Promise<RunSummary>;
  /** An event from beside the run (an alert about the plant's broker, say): journalled while the run lasts, and shown. */
  readonly note: (event: RunEvent) => void;
}

export function newRunId(now: Date = new Date()): string {
  return `${now.toISOString().replace(/[:.]/g, '-')}-${randomUUID().slice(0, 8)}`;
}

export function startSimulatedRun(options: SimulatedRunOptions): SimulatedRun {
  const { recipe } = options;
  const runId = newRunId();
  const chamber = createVirtualChamber(recipe, options.profile, options.seed);
  const controller = createController(recipe, options.controller);
  const estimator = controller.options.estimator;
  const hub = createRunHub({
    ...options.hub,
    recipe,
    source: 'simulated',
    runId,
    estimator,
    speed: Number.isFinite(options.speed) ? options.speed : null,
  });
  let journal: JournalWriter | undefined;
  if (options.journalDir !== undefined) {
    journal = createJournalWriter(join(options.journalDir, runId), {
      runId,
      startedAt: new Date().toISOString(),
      recipe: recipe.name,
      meta: { ...options.meta, source: 'simulator', seed: options.seed, profile: options.profileName ?? options.profile.name, speed: options.speed, estimator },
    });
    // The recipe as run, so that a replay needs nothing else.
    try {
      journal.writeFile('recipe.json', `${JSON.stringify(recipe)}\n`);
    } catch (error) {
      journal.close();
      throw error;
    }
  }
  const run = createSteppedRun(controller, chamber, {
    onInput: (input) => {
      journal?.input(input);
      hub.feed.input(input);
    },
    onEvent: (event) => {
      journal?.event(event);
      hub.feed.event(event);
    },
  });
  hub.attach(run);

  const finish = (): RunSummary => {
    const summary = buildRunSummary(hub.snapshot(), hub.alertHistory(), {
      runId,
      source: 'simulator',
      seed: options.seed,
      profile: options.profileName ?? options.profile.name,
      trueNm: chamber.truth().layers.map((l) => l.partNm),
    });
    if (journal) {
      try {
        journal.writeFile('summary.json', `${JSON.stringify(summary, null, 2)}\n`);
      } finally {
        journal.close();
      }
    }
    return summary;
  };
  const done = runPaced(run, options.speed, {
    ...(options.signal ? { signal: options.signal } : {}),
    ...(options.chunkS !== undefined ? { chunkS: options.chunkS } : {}),
  })
    .then(() => {
      if (options.signal?.aborted && run.running) run.apply({ kind: 'operator', action: 'abort', timeS: Math.max(run.nowS, Number.isFinite(run.state.nowS) ? run.state.nowS : 0) });
    })
    .then(finish, (error: unknown) => {
    journal?.close();
    throw error;
  });
  const note = (event: RunEvent): void => {
    journal?.event(event);
    hub.feed.event(event);
  };
  return { runId, hub, run, dir: journal?.dir ?? null, done, note };
}
