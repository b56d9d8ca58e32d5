/**
 * A run's report: everything a run folder holds, gathered for one self-contained page. The
 * journal goes through the controller again with the recipe as run — which reproduces every
 * recorded decision — into a run hub, so that the report shows what the dashboard showed: the
 * stack table, every layer's trace against its prediction, the crystal's rate, the alerts and
 * the outcome spectrum. The summary, the chamber file and a calibration are read as written.
 */
import { existsSync, readFileSync } from 'node:fs';
import { join } from 'node:path';
import { Worker } from 'node:worker_threads';
import { journalConfirmsCloses, journalEstimator, type JournalHeader } from '../journal/journal-format.ts';
import { openJournal, type JournalReadReport } from '../journal/journal-reader.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { createController } from '../pipeline/controller.ts';
import { runJournalToEnd } from '../pipeline/replay.ts';
import { createRunHub } from './run-hub.ts';
import type { AlertView, OutcomeView, StackRow, TraceView } from './views.ts';

/** One layer's small trace: its prediction (from the plan at the layer's start) and what the monitor read. */
export interface ReportTrace {
  readonly layer: number;
  readonly material: string;
  readonly wavelengthNm: number;
  readonly signal: 'transmission' | 'reflection';
  readonly chipTargetNm: number;
  readonly stepNm: number;
  readonly predicted: readonly number[];
  /** [chip thickness nm, signal fraction], thinned to at most {@link TRACE_POINTS}. */
  readonly measured: readonly (readonly [number, number])[];
}

export interface RunReport {
  readonly id: string;
  readonly header: JournalHeader;
  readonly recipe: ResolvedRecipe;
  /** The chamber file of a live run, as written. */
  readonly chamberText: string | null;
  /** summary.json as written (a run that ended), else null. */
  readonly summary: Record<string, unknown> | null;
  readonly rows: readonly StackRow[];
  readonly alerts: readonly AlertView[];
  readonly traces: readonly ReportTrace[];
  /** The crystal's rate while depositing: [run time s, rate nm/s, band low, band high], thinned. */
  readonly rate: readonly (readonly [number, number, number, number])[];
  readonly outcome: OutcomeView | null;
  /** calibration.json as written, when the run folder holds one. */
  readonly calibration: unknown;
  /** Run time the replay reached, s. */
  readonly durationS: number;
  readonly damage: JournalReadReport;
}

export class RunReportError extends Error {
  override name = 'RunReportError';
}

const TRACE_POINTS = 400;
const RATE_POINTS = 1500;

/** Gathers the report of the run in folder `dir` (its journal and recipe.json needed); refuses in one sentence. */
export function collectRunReport(dir: string, id: string): RunReport {
  const recipeFile = join(dir, 'recipe.json');
  if (!existsSync(recipeFile)) throw new RunReportError(`${dir} holds no recipe.json (the recipe as run), which the report needs`);
  let recipe: ResolvedRecipe;
  try {
    recipe = JSON.parse(readFileSync(recipeFile, 'utf8')) as ResolvedRecipe;
  } catch {
    throw new RunReportError(`${recipeFile} is damaged: it is not JSON`);
  }
  if (recipe === null || typeof recipe !== 'object' || !Array.isArray(recipe.layers) || recipe.layers.length === 0) {
    throw new RunReportError(`${recipeFile} is damaged: it is not a recipe as fringe records it`);
  }
  const journal = openJournal(join(dir, 'journal.ndjson'));
  // Two points a second of run time is plenty for a chart a few centimetres wide.
  const estimator = journalEstimator(journal.header);
  const hub = createRunHub({ recipe, source: 'replay', runId: id, estimator, pointsPerS: 2, maxTracePoints: 100_000, maxRatePoints: 100_000, maxLog: 1 });
  const traces = new Map<number, { view: TraceView; measured: [number, number][] }>();
  hub.subscribe((message) => {
    if (message.type === 'event' && message.event.type === 'layer-started') {
      const view = hub.snapshot().trace;
      if (view) traces.set(view.layer, { view, measured: [] });
    } else if (message.type === 'optical') {
      traces.get(message.layer)?.measured.push([message.point[2], message.point[1]]);
    }
  });
  const controller = createController(recipe, { estimator, confirmCloses: journalConfirmsCloses(journal.header) });
  const run = runJournalToEnd(journal.records, controller, { onInput: hub.feed.input, onEvent: hub.feed.event }, (r) => hub.attach(r));
  const snapshot = hub.snapshot();
  return {
    id,
    header: journal.header,
    recipe,
    chamberText: readOptional(join(dir, 'chamber.yaml')),
    summary: readJsonObject(join(dir, 'summary.json')),
    rows: snapshot.layers,
    alerts: hub.alertHistory(),
    traces: [...traces.values()].map(({ view, measured }) => ({
      layer: view.layer,
      material: view.material,
      wavelengthNm: view.wavelengthNm,
      signal: view.signal,
      chipTargetNm: view.chipTargetNm,
      stepNm: view.stepNm,
      predicted: view.predicted,
      measured: thin(measured, TRACE_POINTS),
    })),
    rate: thin(snapshot.crystal.points, RATE_POINTS),
    outcome: snapshot.outcome,
    calibration: readJsonValue(join(dir, 'calibration.json')),
    durationS: run.nowS,
    damage: journal.report,
  };
}

/** Every k-th point, so that at most `max` remain (the last kept: where the layer ended). */
function thin<T>(points: readonly T[], max: number): T[] {
  if (points.length <= max) return [...points];
  const k = Math.ceil(points.length / max);
  const out = points.filter((_, i) => i % k === 0);
  if ((points.length - 1) % k !== 0) out.push(points[points.length - 1] as T);
  return out;
}

function readOptional(file: string): string | null {
  try {
    return readFileSync(file, 'utf8');
  } catch {
    return null;
  }
}

function readJsonValue(file: string): unknown {
  const text = readOptional(file);
  if (text === null) return undefined;
  try {
    return JSON.parse(text) as unknown;
  } catch {
    return { damaged: `${file} is not JSON` };
  }
}

function readJsonObject(file: string): Record<string, unknown> | null {
  const value = readJsonValue(file);
  return value !== null && typeof value === 'object' && !Array.isArray(value) ? (value as Record<string, unknown>) : null;
}

/**
 * The report page made in a worker thread: replaying a long journal takes seconds, and the
 * server's thread may be running a live run whose cuts must not wait for it. Rejects with a
 * {@link RunReportError} carrying the worker's one sentence.
 */
export function makeRunReportPage(dir: string, id: string): Promise<string> {
  return new Promise((resolve, reject) => {
    const worker = new Worker(new URL('./run-report-worker.js', import.meta.url), { workerData: { dir, id } });
    let settled = false;
    worker.once('message', (message: { ok: true; page: string } | { ok: false; message: string }) => {
      settled = true;
      if (message.ok) resolve(message.page);
      else reject(new RunReportError(message.message));
    });
    worker.once('error', (error) => {
      settled = true;
      reject(error);
    });
    worker.once('exit', (code) => {
      if (!settled) reject(new RunReportError(`the report of run ${id} could not be made (its worker stopped with code ${code})`));
    });
  });
}
