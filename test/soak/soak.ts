/**
 * The soak: simulated runs back to back on the virtual chamber at a multiple of real time, both
 * channels at 1 kHz, each journalled and on show to 20 dashboard viewers over WebSocket, 5 of
 * whom never read their socket. It measures what issue 13 asks of a long run:
 *
 * - memory flat: the heap after a full collection at the start of every run (the server up, the
 *   viewers connected, nothing run yet) and at the end of the soak;
 * - nothing lost: every reading, other input and event handed to the journal is a line in it
 *   (each run's journal is read back, counted, and removed so that hours of soak fit the disk);
 * - decisions fast: the time of every controller step (the cut command is one of a step's
 *   events), its p99 over the whole soak and the worst p99 of any minute, and the slowest step
 *   that cut.
 *
 * The decisions are a pure reducer, so a step that cut is timed again (the least of three) to
 * tell its own cost from the machine's: on two shared cores a step is sometimes preempted.
 */
import { rmSync } from 'node:fs';
import { connect, type Socket } from 'node:net';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { setFlagsFromString } from 'node:v8';
import { runInNewContext } from 'node:vm';
import WebSocket from 'ws';
import { createVirtualChamber, loadSimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';
import { openJournal } from '../../src/journal/journal-reader.ts';
import { createController, type Controller, type ControllerState } from '../../src/pipeline/controller.ts';
import type { PipelineInput } from '../../src/pipeline/types.ts';
import { createSteppedRun, runPaced } from '../../src/pipeline/run-stepped.ts';
import { buildServer } from '../../src/server/build-server.ts';
import { createRunHub } from '../../src/server/run-hub.ts';
import { newRunId } from '../../src/server/simulated-run.ts';
import { StepTimes } from './step-times.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));

export interface SoakOptions {
  /** Wall time to soak, s: runs start until it has passed (the last one is finished). */
  seconds: number;
  /** Multiple of real time each run is paced at. */
  speed: number;
  /** Folder for the runs' journals (each removed once counted). */
  runsDir: string;
  recipeFile?: string;
  estimator?: 'fit' | 'plain';
  /** Viewers that read, and viewers that never read (default 15 and 5). */
  readingViewers?: number;
  stalledViewers?: number;
  /** Stop a run at this run time, s (default: its end); the CI version cuts runs short. */
  maxRunS?: number;
  log?: (line: string) => void;
}

export interface SoakRunFigures {
  seed: number;
  runTimeS: number;
  readings: number;
  otherInputs: number;
  events: number;
  cuts: number;
  journalReadings: number;
  journalOtherInputs: number;
  journalEvents: number;
  damagedLines: number;
  /** Bytes or readings the writer reported it could not write. */
  lostBytes: number;
  droppedReadings: number;
  /** Messages the reading viewers received. */
  messages: number;
  /** Viewers that were still connected (open) at the run's end, reading and stalled. */
  readingOpenAtEnd: number;
  stalledOpenAtEnd: number;
  /** The live feed's count of slow viewers skipped, and resynced. */
  feedDropped: number;
  feedResyncs: number;
  /** Heap after a full collection before the run started, MB. */
  heapStartMb: number;
}

export interface SoakResult {
  wallS: number;
  speed: number;
  estimator: 'fit' | 'plain';
  runs: SoakRunFigures[];
  steps: number;
  stepP50Us: number;
  stepP99Us: number;
  /** The worst p99 of any wall-clock minute. */
  worstMinuteP99Us: number;
  stepMaxUs: number;
  cutSteps: number;
  /** The slowest step that cut, as measured, and its own cost (the least of it and three re-runs). */
  cutMaxUs: number;
  cutOwnMaxUs: number;
  heapStartMb: number;
  heapEndMb: number;
  heapMaxMb: number;
  /** Every run's journal holds what it was handed, none damaged, nothing reported lost. */
  journalsComplete: boolean;
}

/** A full collection: --expose-gc's, or one fetched by setting the flag now (under vitest). */
const collect: () => void = (globalThis as { gc?: () => void }).gc ?? (setFlagsFromString('--expose-gc'), runInNewContext('gc') as () => void);

const gc = (): number => {
  collect();
  collect();
  return process.memoryUsage().heapUsed / 1e6;
};

/** A controller whose every step is timed (wall time of the step alone, the cut command inside it). */
function timed(controller: Controller, times: StepTimes): Controller {
  return {
    ...controller,
    step(state, input) {
      const start = performance.now();
      const result = controller.step(state, input);
      const us = (performance.now() - start) * 1000;
      const cut = result.events.some((e) => e.type === 'cut');
      times.add(us, cut ? Math.min(us, ...[0, 1, 2].map(() => timeStep(controller, state, input))) : null);
      return result;
    },
  };
}

function timeStep(controller: Controller, state: ControllerState, input: PipelineInput): number {
  const start = performance.now();
  controller.step(state, input);
  return (performance.now() - start) * 1000;
}

/** A viewer that upgrades to the live feed and then never reads a byte. */
function stalledViewer(port: number): Promise<Socket> {
  return new Promise((resolve, reject) => {
    const socket = connect({ host: '127.0.0.1', port }, () => {
      socket.write(
        `GET /api/live HTTP/1.1\r\nHost: 127.0.0.1:${port}\r\nUpgrade: websocket\r\nConnection: Upgrade\r\n` +
          `Sec-WebSocket-Key: c29hay1zdGFsbGVkLXZpZXc=\r\nSec-WebSocket-Version: 13\r\n\r\n`,
      );
      resolve(socket);
    });
    socket.once('error', reject);
  });
}

type SettledOptions = Required<Omit<SoakOptions, 'log' | 'maxRunS'>> & { maxRunS: number | undefined };

async function soakOneRun(seed: number, options: SettledOptions, times: StepTimes): Promise<SoakRunFigures> {
  const recipe = loadRecipe(options.recipeFile);
  const base = loadSimProfile(join(root, 'config/sim/typical.yaml'));
  const profile = { ...base, optical: { ...base.optical, sampleRateHz: 1000 }, crystal: { ...base.crystal, sampleRateHz: 1000 } };
  const runId = newRunId();
  const hub = createRunHub({ recipe, source: 'simulated', runId, speed: options.speed });
  const controller = timed(createController(recipe, { estimator: options.estimator }), times);
  const journal = createJournalWriter(join(options.runsDir, runId), {
    runId,
    startedAt: new Date().toISOString(),
    recipe: recipe.name,
    meta: { source: 'simulator', seed, profile: 'typical at 1 kHz', speed: options.speed, estimator: options.estimator },
  });
  const counts = { readings: 0, otherInputs: 0, events: 0, cuts: 0 };
  const run = createSteppedRun(controller, createVirtualChamber(recipe, profile, seed), {
    ...(options.maxRunS !== undefined ? { maxS: options.maxRunS } : {}),
    onInput: (input) => {
      if (input.kind === 'reading') counts.readings++;
      else counts.otherInputs++;
      journal.input(input);
      hub.feed.input(input);
    },
    onEvent: (event) => {
      counts.events++;
      if (event.type === 'cut') counts.cuts++;
      journal.event(event);
      hub.feed.event(event);
    },
  });
  hub.attach(run);
  const app = buildServer({ hub, runsDir: options.runsDir }, { token: 'soak-token-soak-token-soak', host: '127.0.0.1' });
  await app.listen({ port: 0, host: '127.0.0.1' });
  const port = (app.server.address() as { port: number }).port;
  let messages = 0;
  const readers = await Promise.all(
    Array.from({ length: options.readingViewers }, () => new Promise<WebSocket>((resolve, reject) => {
      const ws = new WebSocket(`ws://127.0.0.1:${port}/api/live`);
      ws.on('message', () => messages++);
      ws.once('open', () => resolve(ws));
      ws.once('error', reject);
    })),
  );
  const stalled = await Promise.all(Array.from({ length: options.stalledViewers }, () => stalledViewer(port)));
  const closedStalled = new Set<Socket>();
  for (const s of stalled) s.once('close', () => closedStalled.add(s));
  const heapStartMb = gc();

  await runPaced(run, options.speed);

  const readingOpenAtEnd = readers.filter((ws) => ws.readyState === WebSocket.OPEN).length;
  const stalledOpenAtEnd = stalled.length - closedStalled.size;
  const { dropped, resyncs } = app.fringe.liveStats;
  for (const ws of readers) ws.terminate();
  for (const s of stalled) s.destroy();
  await app.close();
  const loss = journal.close();

  const found = { readings: 0, otherInputs: 0, events: 0 };
  const stream = openJournal(journal.file);
  for (const record of stream.records) {
    if (record.k === 'r') found.readings++;
    else if (record.k === 'i') found.otherInputs++;
    else if (record.k === 'e') found.events++;
  }
  const damagedLines = stream.report.damagedLines + (stream.report.truncated ? 1 : 0);
  rmSync(journal.dir, { recursive: true, force: true });
  return {
    seed,
    runTimeS: run.nowS,
    ...counts,
    journalReadings: found.readings,
    journalOtherInputs: found.otherInputs,
    journalEvents: found.events,
    damagedLines,
    lostBytes: loss.pendingBytes,
    droppedReadings: loss.droppedReadings,
    messages,
    readingOpenAtEnd,
    stalledOpenAtEnd,
    feedDropped: dropped,
    feedResyncs: resyncs,
    heapStartMb,
  };
}

export async function runSoak(options: SoakOptions): Promise<SoakResult> {
  const settled: SettledOptions = {
    seconds: options.seconds,
    speed: options.speed,
    runsDir: options.runsDir,
    recipeFile: options.recipeFile ?? join(root, 'config/recipes/edge-longpass-visible.yaml'),
    estimator: options.estimator ?? 'fit',
    readingViewers: options.readingViewers ?? 15,
    stalledViewers: options.stalledViewers ?? 5,
    maxRunS: options.maxRunS,
  };
  const log = options.log ?? (() => undefined);
  const times = new StepTimes();
  const runs: SoakRunFigures[] = [];
  const heaps: number[] = [];
  const minute = setInterval(() => times.closeWindow(), 60_000);
  const startMs = performance.now();
  try {
    for (let seed = 1; runs.length === 0 || performance.now() - startMs < settled.seconds * 1000; seed++) {
      const figures = await soakOneRun(seed, settled, times);
      runs.push(figures);
      heaps.push(figures.heapStartMb);
      log(
        `run ${seed}: ${figures.runTimeS.toFixed(0)} s run time, ${figures.readings} readings, ${figures.cuts} cuts; journal ${figures.journalReadings} readings, ${figures.journalEvents} events; ` +
          `heap at start ${figures.heapStartMb.toFixed(1)} MB; step p99 so far ${times.percentile(0.99).toFixed(1)} µs; ${((performance.now() - startMs) / 60_000).toFixed(1)} min`,
      );
    }
  } finally {
    clearInterval(minute);
  }
  times.closeWindow();
  const heapEndMb = gc();
  heaps.push(heapEndMb);
  return {
    wallS: (performance.now() - startMs) / 1000,
    speed: settled.speed,
    estimator: settled.estimator,
    runs,
    steps: times.count,
    stepP50Us: times.percentile(0.5),
    stepP99Us: times.percentile(0.99),
    worstMinuteP99Us: times.worstWindowP99,
    stepMaxUs: times.maxUs,
    cutSteps: times.cutCount,
    cutMaxUs: times.cutMaxUs,
    cutOwnMaxUs: times.cutOwnMaxUs,
    heapStartMb: heaps[0] as number,
    heapEndMb,
    heapMaxMb: Math.max(...heaps),
    journalsComplete: runs.every(
      (r) => r.journalReadings === r.readings && r.journalOtherInputs === r.otherInputs && r.journalEvents === r.events && r.damagedLines === 0 && r.lostBytes === 0 && r.droppedReadings === 0,
    ),
  };
}
