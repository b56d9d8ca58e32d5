/**
 * `fringe run --chamber FILE RECIPE`: a live run with the chamber's drivers, journalled; and
 * `fringe run --resume RUN`: the state rebuilt from a journal, continuing the layer in progress.
 */
import { readFileSync } from 'node:fs';
import { join } from 'node:path';
import { parseArgs } from 'node:util';
import { combineLatest, filter, first, firstValueFrom, Subject, throwError, timeout } from 'rxjs';
import { loadChamber, openChamber } from '../../../drivers/index.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { journalEstimator } from '../../journal/journal-format.ts';
import { createJournalWriter } from '../../journal/journal-writer.ts';
import type { ResolvedRecipe } from '../../model/plan/recipe.ts';
import { ALERTS } from '../../pipeline/codes.ts';
import { createController, type ControllerState } from '../../pipeline/controller.ts';
import type { RunEvent } from '../../pipeline/events.ts';
import { createLiveRun } from '../../pipeline/live-run.ts';
import { replayJournal } from '../../pipeline/replay.ts';
import type { OperatorAction, ReadingSource } from '../../pipeline/types.ts';
import { createRunHub } from '../../server/run-hub.ts';
import { allowHostOption, CliError, estimatorOption } from '../cli-error.ts';
import { readRecordedRecipe, readRecordedRun } from '../run-folder.ts';
import { serveDashboard } from '../serve-dashboard.ts';
import type { CommandIo } from '../command-io.ts';

export const runUsage = `Usage: fringe run --chamber FILE RECIPE [options]
       fringe run --resume RUN [--chamber FILE]

Runs the recipe live: reads the chamber's instruments, cuts every layer, journals everything
to runs/<id>/. Ctrl-C aborts the run (every shutter is asked to close). fringe is process
control, not a safety system: the manual shutter controls and interlocks stay in charge.

  --chamber FILE        the chamber file: instruments, ports, line formats, shutters
  --runs DIR            where runs are kept (default: runs)
  --clock arrival|instrument   decide on the host's clock (default) or the readings' own
  --estimator fit|plain  cut optical layers on the model fit (default) or the plain rules
  --resume RUN          continue the run in RUN (a run folder) after a crash
  --serve               serve the live dashboard on 127.0.0.1 (--port N, default 7300; --host wider warns;
                        --allow-host NAME for another name it answers to, as in fringe demo --help)
  --materials FILE      material library (default: the shipped config/materials.yaml)
`;

export async function runLive(argv: string[], io: CommandIo): Promise<number> {
  const { values, positionals } = parseArgs({
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
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(runUsage);
    return 0;
  }
  const allowedHosts = allowHostOption(values['allow-host']);
  const runClock = values.clock ?? 'arrival';
  if (runClock !== 'arrival' && runClock !== 'instrument') throw new CliError(`--clock must be arrival or instrument, got "${runClock}"`);

  let estimator = estimatorOption(values.estimator);
  let recipe: ResolvedRecipe;
  let resumeFrom: ControllerState | undefined;
  let runDir: string;
  let chamberFile = values.chamber;
  if (values.resume !== undefined) {
    if (positionals.length > 0) throw new CliError('--resume takes the recipe from the run; give no RECIPE');
    const recorded = readRecordedRun(values.resume);
    runDir = recorded.dir;
    recipe = readRecordedRecipe(runDir, 'it is not a run folder fringe can resume');
    const journal = recorded.journal;
    // The run goes on as it began: the recorded estimator (a different --estimator is refused).
    const recordedEstimator = journalEstimator(journal.header);
    if (values.estimator !== undefined && estimator !== recordedEstimator) {
      throw new CliError(`the run in ${runDir} cuts with the ${recordedEstimator === 'fit' ? 'model fit' : 'plain rules'}; it resumes the same way (leave out --estimator)`);
    }
    estimator = recordedEstimator;
    resumeFrom = replayJournal(journal.records, createController(recipe, { estimator })).state;
    if (resumeFrom.phase === 'finished' || resumeFrom.phase === 'aborted') throw new CliError(`the run in ${runDir} has already ${resumeFrom.phase === 'finished' ? 'finished' : 'been aborted'}`, 1);
    chamberFile ??= join(runDir, 'chamber.yaml');
    io.err(`resuming ${runDir} at layer ${resumeFrom.index + 1} (${resumeFrom.phase}), run time ${resumeFrom.nowS.toFixed(1)} s`);
  } else {
    if (positionals.length !== 1) throw new CliError('run needs exactly one RECIPE file and --chamber FILE (see fringe run --help)');
    if (chamberFile === undefined) throw new CliError('run needs --chamber FILE: which instruments to read and which shutters to drive');
    recipe = loadRecipe(positionals[0] as string, loadMaterialLibrary(values.materials));
    const runId = `${new Date().toISOString().replace(/[:.]/g, '-')}`;
    runDir = join(values.runs ?? 'runs', runId);
  }
  const chamber = loadChamber(chamberFile);
  const drivers = openChamber(chamber);
  if (!drivers.shutter) {
    await drivers.close();
    throw new CliError(`${chamberFile} names no shutters: fringe cannot cut without them`, 1);
  }
  const journal = createJournalWriter(runDir, {
    runId: runDir.split(/[\\/]/).pop() ?? runDir,
    startedAt: new Date().toISOString(),
    recipe: recipe.name,
    meta: { source: 'live', chamber: chamber.name, clock: runClock, estimator, ...(resumeFrom ? { resumedAtS: resumeFrom.nowS } : {}) },
  });
  if (!resumeFrom) {
    journal.writeFile('recipe.json', `${JSON.stringify(recipe)}\n`);
    journal.writeFile('chamber.yaml', readFileSync(chamberFile, 'utf8'));
  }

  const commands = new Subject<{ action: OperatorAction; alertId?: string }>();
  const controller = createController(recipe, { estimator });
  const live = createLiveRun({
    controller,
    sources: [...drivers.sources.values()],
    shutter: drivers.shutter,
    commands,
    runClock,
    ...(resumeFrom ? { resumeFrom } : {}),
  });
  const statusSubs = [...drivers.sources.entries()].map(([id, source]) =>
    source.status.subscribe((s) => io.err(`${id}: ${s.state}${s.detail ? ` (${s.detail})` : ''}`)),
  );
  // The shutter output's own alerts (no acknowledgement, not sent) go into the journal beside the controller's.
  let shutterAlerts = 0;
  const alertSub = drivers.shutter.alerts.subscribe((a) => {
    shutterAlerts++;
    const code = a.code;
    const message = `${ALERTS[code].sentence} (${a.source} ${a.action}: ${a.detail})`;
    journal.event({ type: 'alert', timeS: a.timeS, id: `S${shutterAlerts}`, severity: 'critical', code, message, layer: null });
    io.out(`ALERT critical ${code}: ${message}`);
  });

  // The dashboard sees the live run through a hub; its commands step the controller at once.
  let lastState: ControllerState = resumeFrom ?? controller.initial();
  const hub = values.serve ? createRunHub({ recipe, source: 'live', runId: runDir.split(/[\\/]/).pop() ?? null }) : undefined;
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
  const dashboard = hub ? await serveDashboard(hub, join(runDir, '..'), values, allowedHosts, io) : undefined;

  let outcome: 'complete' | 'aborted' | undefined;
  let subscription: { unsubscribe(): void } | undefined;
  await new Promise<void>((resolve) => {
    subscription = live.decisions.subscribe({
      next(decision) {
        journal.input(decision.input);
        hub?.feed.input(decision.input);
        lastState = decision.state;
        for (const event of decision.events) {
          journal.event(event);
          hub?.feed.event(event);
          if (event.type !== 'shutter' || event.command.action === 'close') io.out(describe(event));
          if (event.type === 'run-finished') {
            outcome = event.outcome;
            resolve();
          }
        }
      },
      error(error: unknown) {
        io.err(`the run stopped: ${(error as Error).message}`);
        resolve();
      },
    });
    const onSignal = (): void => {
      io.err('aborting: every shutter is asked to close');
      commands.next({ action: 'abort' });
    };
    process.once('SIGINT', onSignal);
    process.once('SIGTERM', onSignal);
    // Start only when every instrument has been speaking for a second: a shutter command sent
    // before its port is open is refused, a run must not begin blind, and lines the port held
    // from before must be read out first so that run time is the instruments' time now.
    void firstReadings([...drivers.sources.entries()], 30_000).then(
      async () => {
        await new Promise((r) => setTimeout(r, 1000));
        if (!resumeFrom) commands.next({ action: 'start' });
        io.err(resumeFrom ? 'instruments answering: resuming' : 'instruments answering: run started');
      },
      (error: unknown) => {
        io.err((error as Error).message);
        resolve();
      },
    );
  });
  subscription?.unsubscribe();
  for (const s of statusSubs) s.unsubscribe();
  alertSub.unsubscribe();
  journal.close();
  await drivers.close();
  await dashboard?.close();
  io.err(`journal: ${runDir}`);
  return outcome === 'complete' ? 0 : 1;
}

/** Resolves when every source has delivered a reading; rejects naming the silent ones after `timeoutMs`. */
function firstReadings(sources: [string, ReadingSource][], timeoutMs: number): Promise<void> {
  return firstValueFrom(
    combineLatest(sources.map(([, s]) => s.readings.pipe(filter((r) => r.kind === 'reading'), first()))).pipe(
      timeout({ first: timeoutMs, with: () => throwError(() => new Error(`no reading from ${sources.map(([id]) => id).join(', ')} within ${timeoutMs / 1000} s; check the cables and the chamber file`)) }),
    ),
  ).then(() => undefined);
}

function describe(e: RunEvent): string {
  const t = `${e.timeS.toFixed(1).padStart(8)} s`;
  switch (e.type) {
    case 'layer-started':
      return `${t}  layer ${e.layer} ${e.material}: ${e.targetNm.toFixed(2)} nm, cut on ${e.cut}`;
    case 'cut':
      return `${t}  layer ${e.layer} cut (${e.reason}), about ${e.estimatedNm.toFixed(2)} nm`;
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
