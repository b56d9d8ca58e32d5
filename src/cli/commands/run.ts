/**
 * `fringe run --chamber FILE RECIPE`: a live run with the chamber's drivers, journalled; and
 * `fringe run --resume RUN`: the state rebuilt from a journal, continuing the layer in progress.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { parseCommandArgs } from '../parse-command-args.ts';
import { combineLatest, filter, first, firstValueFrom, Subject, throwError, timeout } from 'rxjs';
import { loadChamber, openChamber } from '../../../drivers/index.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { journalConfirmsCloses, journalEstimator } from '../../journal/journal-format.ts';
import { createJournalWriter, describeLoss, JournalWriteError, type JournalWriter, type JournalWriterOptions } from '../../journal/journal-writer.ts';
import type { ResolvedRecipe } from '../../model/plan/recipe.ts';
import { ALERTS } from '../../pipeline/codes.ts';
import { createController, type ControllerState } from '../../pipeline/controller.ts';
import { CUT_REASON_WORDS, ESTIMATOR_WORDS, plannedCutWords, wordFor, type Estimator } from '../../pipeline/cut-words.ts';
import type { RunEvent } from '../../pipeline/events.ts';
import { createLiveRun } from '../../pipeline/live-run.ts';
import { runJournalToEnd } from '../../pipeline/replay.ts';
import type { OperatorAction, ReadingSource } from '../../pipeline/types.ts';
import { createRunHub, type RunHub } from '../../server/run-hub.ts';
import { allowHostOption, CliError, estimatorOption, outputFolderOption } from '../cli-error.ts';
import { readRecordedRecipe, readRecordedRun, warnOfDamage, type RecordedRun } from '../run-folder.ts';
import { serveDashboard } from '../serve-dashboard.ts';
import { PLANT_OPTIONS, plantPlan, plantUsage, startPlant, stopPlant } from '../plant-options.ts';
import { driveRun } from '../drive-run.ts';
import type { CommandIo } from '../command-io.ts';

export const runUsage = `Usage: fringe run --chamber FILE RECIPE [options]
       fringe run --resume RUN [--chamber FILE]

Runs the recipe live: reads the chamber's instruments, cuts every layer, journals everything
to runs/<id>/. Ctrl-C aborts the run: every shutter is asked to close and fringe waits up to
10 s for the closes to be confirmed, then says which were and which were not (a second Ctrl-C
stops waiting). fringe is process control, not a safety system: the manual shutter controls
and interlocks stay in charge.

  --chamber FILE        the chamber file: instruments, ports, line formats, shutters
  --runs DIR            where runs are kept (default: runs)
  --clock arrival|instrument   decide on the host's clock (default) or the readings' own
                        (a resumed run keeps the clock and the estimator it was recorded with)
  --estimator fit|plain  cut optical layers on the model fit (default) or the plain rules
  --resume RUN          continue the run in RUN (a run folder) after a crash
  --serve               serve the live dashboard on 127.0.0.1 (--port N, default 7300; --host wider warns;
                        --allow-host NAME for another name it answers to, as in fringe demo --help)
  --materials FILE      material library (default: the shipped config/materials.yaml)
${plantUsage}`;

/** What a test may put in place of the real thing. */
export interface RunLiveDeps {
  /** The journal's own write and sync to disk (a test makes them fail). */
  journal?: Pick<JournalWriterOptions, 'write' | 'fsync'>;
}

export async function runLive(argv: string[], io: CommandIo, deps: RunLiveDeps = {}): Promise<number> {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      chamber: { type: 'string' },
      runs: { type: 'string' },
      clock: { type: 'string' },
      estimator: { type: 'string' },
      resume: { type: 'string' },
      serve: { type: 'boolean' },
      port: { type: 'string' },
      host: { type: 'string' },
      'allow-host': { type: 'string', multiple: true },
      materials: { type: 'string' },
      ...PLANT_OPTIONS,
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(runUsage);
    return 0;
  }
  const allowedHosts = allowHostOption(values['allow-host']);
  const clockOption = values.clock ?? 'arrival';
  if (clockOption !== 'arrival' && clockOption !== 'instrument') throw new CliError(`--clock must be arrival or instrument, got "${clockOption}"`);
  let runClock: 'arrival' | 'instrument' = clockOption;

  let estimator = estimatorOption(values.estimator);
  let recipe: ResolvedRecipe;
  let recorded: RecordedRun | undefined;
  let runDir: string;
  let chamberFile = values.chamber;
  if (values.resume !== undefined) {
    if (positionals.length > 0) throw new CliError('--resume takes the recipe from the run; give no RECIPE');
    recorded = readRecordedRun(values.resume);
    runDir = recorded.dir;
    recipe = readRecordedRecipe(runDir, 'it is not a run folder fringe can resume');
    const journal = recorded.journal;
    // The run goes on as it began: the recorded estimator (a different --estimator is refused).
    const recordedEstimator = journalEstimator(journal.header);
    if (values.estimator !== undefined && estimator !== recordedEstimator) {
      throw new CliError(`the run in ${runDir} cuts with the ${ESTIMATOR_WORDS[recordedEstimator]}; it resumes the same way (leave out --estimator)`);
    }
    estimator = recordedEstimator;
    // And on its recorded clock (journals from before it was recorded: the arrival clock, then the only one).
    const recordedClock = journal.header.meta.clock === 'instrument' ? 'instrument' : 'arrival';
    if (values.clock !== undefined && runClock !== recordedClock) {
      throw new CliError(`the run in ${runDir} decides on the ${recordedClock} clock; it resumes on it (leave out --clock)`);
    }
    runClock = recordedClock;
    chamberFile ??= join(runDir, 'chamber.yaml');
  } else {
    if (positionals.length !== 1) throw new CliError('run needs exactly one RECIPE file and --chamber FILE (see fringe run --help)');
    if (chamberFile === undefined) throw new CliError('run needs --chamber FILE: which instruments to read and which shutters to drive');
    recipe = loadRecipe(positionals[0] as string, loadMaterialLibrary(values.materials));
    const runId = `${new Date().toISOString().replace(/[:.]/g, '-')}`;
    runDir = join(outputFolderOption('runs', values.runs ?? 'runs'), runId);
  }
  const chamber = loadChamber(chamberFile);
  const plant = plantPlan(values, chamber.name, { settings: chamber.plant, file: chamberFile });
  // The dashboard sees the live run through a hub; its commands step the controller at once.
  const hub = values.serve || plant ? createRunHub({ recipe, source: 'live', runId: runDir.split(/[\\/]/).pop() ?? null, estimator }) : undefined;
  let resumeFrom: ControllerState | undefined;
  if (recorded) {
    // The journal through the controller, and through the hub, so the dashboard shows the run
    // as it stood (finished layers and their cuts, the alerts, the layer's trace), not from now.
    const controller = createController(recipe, { estimator, confirmCloses: journalConfirmsCloses(recorded.journal.header) });
    resumeFrom = runJournalToEnd(recorded.journal.records, controller, hub ? { onInput: hub.feed.input, onEvent: hub.feed.event } : {}, (replay) => hub?.attach(replay)).state;
    warnOfDamage(recorded, io);
    if (resumeFrom.phase === 'finished' || resumeFrom.phase === 'aborted') throw new CliError(`the run in ${runDir} has already ${resumeFrom.phase === 'finished' ? 'finished' : 'been aborted'}`, 1);
    io.err(`resuming ${runDir} at layer ${resumeFrom.index + 1} (${resumeFrom.phase}), run time ${resumeFrom.nowS.toFixed(1)} s`);
  }
  const drivers = openChamber(chamber);
  if (!drivers.shutter) {
    await drivers.close();
    throw new CliError(`${chamberFile} names no shutters: fringe cannot cut without them`, 1);
  }
  // A journal the disk refuses is an alert to the operator and the dashboard, not the run's end.
  const journalAlerts = createJournalAlerts(io);
  let journal: JournalWriter;
  try {
    journal = createJournalWriter(
      runDir,
      { runId: runDir.split(/[\\/]/).pop() ?? runDir, startedAt: new Date().toISOString(), recipe: recipe.name, meta: { source: 'live', chamber: chamber.name, clock: runClock, estimator, confirmCloses: true } },
      { ...deps.journal, ...journalAlerts.writerOptions, ...(resumeFrom ? { resumedAtS: resumeFrom.nowS } : {}) },
    );
  } catch (error) {
    await drivers.close();
    throw error instanceof JournalWriteError ? new CliError(error.message, 1) : error;
  }
  try {
    if (!resumeFrom) {
      journal.writeFile('recipe.json', `${JSON.stringify(recipe)}\n`);
      journal.writeFile('chamber.yaml', readFileSync(chamberFile, 'utf8'));
    }
  } catch (error) {
    // Without the recipe beside it the run could not be resumed nor replayed: do not start it.
    journal.close();
    await drivers.close();
    throw error instanceof JournalWriteError ? new CliError(error.message, 1) : error;
  }

  const commands = new Subject<{ action: OperatorAction; alertId?: string }>();
  // The shutter output confirms every command (acknowledged, or written): a close unconfirmed holds the run.
  const controller = createController(recipe, { estimator, confirmCloses: true });
  const shutter = drivers.shutter;
  const live = createLiveRun({
    controller,
    sources: drivers.sources,
    ...(drivers.shutterLink ? { links: new Map([['shutters', drivers.shutterLink.status]]) } : {}),
    shutter,
    commands,
    runClock,
    ...(resumeFrom ? { resumeFrom } : {}),
  });
  const statusSubs = [...drivers.sources.entries()].map(([id, source]) =>
    source.status.subscribe((s) => io.err(`${id}: ${s.state}${s.detail ? ` (${s.detail})` : ''}`)),
  );

  let lastState: ControllerState = resumeFrom ?? controller.initial();
  journalAlerts.attach(journal, () => (Number.isFinite(lastState.nowS) ? lastState.nowS : 0), hub);
  hub?.attach({
    get state() {
      return lastState;
    },
    get nowS() {
      return Number.isFinite(lastState.nowS) ? lastState.nowS : 0;
    },
    get running() {
      return lastState.phase !== 'finished' && lastState.phase !== 'aborted';
    },
    apply(input) {
      if (input.kind === 'operator') commands.next(input.alertId === undefined ? { action: input.action } : { action: input.action, alertId: input.alertId });
    },
  });
  const dashboard = hub && values.serve ? await serveDashboard(hub, join(runDir, '..'), values, allowedHosts, io) : undefined;
  const publisher = hub && plant ? startPlant(plant, hub, (alert) => { journal.event(alert); hub.feed.event(alert); }, io) : undefined;
  publisher?.setDashboard(dashboard?.url ?? null);

  // Start only when every instrument has been speaking for a second: a shutter command sent
  // before its port is open is refused, a run must not begin blind, and lines the port held
  // from before must be read out first so that run time is the instruments' time now.
  const ready = firstReadings([...drivers.sources.entries()], 30_000).then(async () => {
    await new Promise((r) => setTimeout(r, 1000));
    io.err(resumeFrom ? 'instruments answering: resuming' : 'instruments answering: run started');
  });
  const result = await driveRun({
    live,
    commands,
    shutter,
    recipe,
    initial: lastState,
    ready,
    start: !resumeFrom,
    io,
    onDecision(decision) {
      lastState = decision.state;
      journal.input(decision.input);
      hub?.feed.input(decision.input);
      for (const event of decision.events) {
        journal.event(event);
        hub?.feed.event(event);
        if (event.type !== 'shutter' || event.command.action === 'close') io.out(describe(event, estimator));
      }
    },
  });
  for (const s of statusSubs) s.unsubscribe();
  const lost = journal.close();
  if (lost.pendingBytes > 0 || lost.droppedReadings > 0) io.err(`the journal is incomplete: ${describeLoss(lost)}`);
  await drivers.close();
  await stopPlant(publisher, io);
  await dashboard?.close();
  io.err(`journal: ${runDir}`);
  return result.outcome === 'complete' ? 0 : 1;
}

/**
 * The journal's write failures and recoveries as alerts: printed at once, and — once attached —
 * journalled (they reach the disk with the lines held back) and fed to the dashboard.
 */
function createJournalAlerts(io: CommandIo): {
  writerOptions: Pick<JournalWriterOptions, 'onWriteError' | 'onWriteRecovered'>;
  attach(journal: JournalWriter, nowS: () => number, hub: RunHub | undefined): void;
} {
  let count = 0;
  let target: { journal: JournalWriter; nowS: () => number; hub: RunHub | undefined } | undefined;
  const raise = (code: 'journal-write-failed' | 'journal-recovered', detail: string): void => {
    const { severity, sentence } = ALERTS[code];
    const message = `${sentence} (${detail})`;
    io.out(`ALERT ${severity} ${code}: ${message}`);
    if (!target) return;
    const event: RunEvent = { type: 'alert', timeS: target.nowS(), id: `J${++count}`, severity, code, message, layer: null };
    target.journal.event(event);
    target.hub?.feed.event(event);
  };
  return {
    writerOptions: {
      onWriteError: (error, loss) => raise('journal-write-failed', `${error.message}; ${describeLoss(loss)}`),
      onWriteRecovered: (loss) => raise('journal-recovered', describeLoss(loss)),
    },
    attach: (journal, nowS, hub) => {
      target = { journal, nowS, hub };
    },
  };
}

/** Resolves when every source has delivered a reading; rejects naming the silent ones after `timeoutMs`. */
function firstReadings(sources: [string, ReadingSource][], timeoutMs: number): Promise<void> {
  return firstValueFrom(
    combineLatest(sources.map(([, s]) => s.readings.pipe(filter((r) => r.kind !== 'fault'), first()))).pipe(
      timeout({ first: timeoutMs, with: () => throwError(() => new Error(`no reading from ${sources.map(([id]) => id).join(', ')} within ${timeoutMs / 1000} s; check the cables and the chamber file`)) }),
    ),
  ).then(() => undefined);
}

function describe(e: RunEvent, estimator: Estimator): string {
  const t = `${e.timeS.toFixed(1).padStart(8)} s`;
  switch (e.type) {
    case 'layer-started':
      return `${t}  layer ${e.layer} ${e.material}: ${e.targetNm.toFixed(2)} nm, cut on ${plannedCutWords(e.cut, estimator)}`;
    case 'cut':
      return `${t}  layer ${e.layer} cut on ${wordFor(CUT_REASON_WORDS, e.reason)}, about ${e.estimatedNm.toFixed(2)} nm`;
    case 'layer-finished':
      return `${t}  layer ${e.layer} finished: ${e.estimatedNm.toFixed(2)} nm${e.skipped ? ' (skipped)' : ''}`;
    case 'alert':
      return `${t}  ALERT ${e.severity} ${e.code}: ${e.message}`;
    case 'shutter':
      return `${t}  shutter ${e.command.source} ${e.command.action}`;
    default:
      return `${t}  ${e.type}`;
  }
}
