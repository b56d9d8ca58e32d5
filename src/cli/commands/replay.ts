/**
 * `fringe replay RUN`: feeds a journal's inputs through the controller — with the recipe as run,
 * or a changed one — and reports layer by layer where the replay cuts against where the run
 * did, flagging every difference.
 */
import { basename, join } from 'node:path';
import { parseCommandArgs } from '../parse-command-args.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import type { ResolvedRecipe } from '../../model/plan/recipe.ts';
import { createController } from '../../pipeline/controller.ts';
import { CUT_REASON_WORDS, wordFor } from '../../pipeline/cut-words.ts';
import { replayJournal, replayJournalPaced, type CutComparison } from '../../pipeline/replay.ts';
import { startJournalReplay } from '../../server/journal-run.ts';
import { journalConfirmsCloses, journalEstimator } from '../../journal/journal-format.ts';
import { allowHostOption, CliError, estimatorOption } from '../cli-error.ts';
import { readRecordedRecipe, readRecordedRun, warnOfDamage } from '../run-folder.ts';
import { serveDashboard } from '../serve-dashboard.ts';
import type { CommandIo } from '../command-io.ts';
import { PLANT_OPTIONS, plantPlan, plantUsage, startPlant, stopPlant } from '../plant-options.ts';

export const replayUsage = `Usage: fringe replay RUN [options]

Feeds a recorded run (a run folder, or its journal.ndjson) through the controller and compares
every cut with the recorded one. With the recipe as run, every decision must come out the same.

  --recipe FILE         replay with this recipe instead of the one recorded with the run
  --estimator fit|plain replay with this estimator instead of the recorded one (the cuts then differ)
  --speed X|max         replay at X times the recorded pace, printing each cut as it comes (default max)
  --serve               watch the replay on the dashboard (at --speed, default 60; --port N, default 7300;
                        --host, --allow-host NAME as in fringe demo --help)
  --json                print the comparison as one object with a "layers" array
  --materials FILE      material library for --recipe (default: the shipped one)
${plantUsage}                        (with --serve only)
`;

export async function runReplay(argv: string[], io: CommandIo): Promise<number> {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      recipe: { type: 'string' },
      estimator: { type: 'string' },
      json: { type: 'boolean' },
      speed: { type: 'string' },
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
    io.out(replayUsage);
    return 0;
  }
  const allowedHosts = allowHostOption(values['allow-host']);
  if (!values.serve && values.mqtt !== undefined) throw new CliError('--mqtt publishes a replay watched with --serve; add --serve');
  if (positionals.length !== 1) throw new CliError('replay needs exactly one RUN (a run folder or a journal file)');
  const recorded = readRecordedRun(positionals[0] as string);
  const { dir, journalFile, journal } = recorded;
  const recipe: ResolvedRecipe = values.recipe
    ? loadRecipe(values.recipe, loadMaterialLibrary(values.materials))
    : readRecordedRecipe(dir, 'give one with --recipe');
  if (values.serve) {
    if (values.recipe || values.estimator) throw new CliError('--serve replays the run as it was recorded; drop --recipe and --estimator');
    const plant = plantPlan(values, 'replay');
    const folder = { id: basename(dir), dir, journalFile, summaryFile: join(dir, 'summary.json'), recipeFile: join(dir, 'recipe.json') };
    const speed = values.speed === undefined || values.speed === 'max' ? 60 : Number(values.speed);
    if (!(speed > 0 && Number.isFinite(speed))) throw new CliError(`--speed must be a positive number with --serve, got "${values.speed}"`);
    const replay = startJournalReplay(folder, speed);
    const dashboard = await serveDashboard(replay.hub, join(dir, '..'), values, allowedHosts, io);
    const publisher = plant ? startPlant(plant, replay.hub, replay.hub.feed.event, io) : undefined;
    publisher?.setDashboard(dashboard.url);
    io.out(`replaying ${folder.id} at ${speed}× on ${dashboard.url}; Ctrl-C ends`);
    await new Promise<void>((resolve) => {
      process.once('SIGINT', resolve);
      process.once('SIGTERM', resolve);
    });
    await stopPlant(publisher, io);
    await dashboard.close();
    return 0;
  }
  const speedText = values.speed ?? 'max';
  const speed = speedText === 'max' ? Number.POSITIVE_INFINITY : Number(speedText);
  if (!(speed > 0)) throw new CliError(`--speed must be a positive number or "max", got "${speedText}"`);
  const controller = createController(recipe, {
    estimator: estimatorOption(values.estimator, journalEstimator(journal.header)),
    confirmCloses: journalConfirmsCloses(journal.header),
  });
  const result = Number.isFinite(speed)
    ? await replayJournalPaced(journal.records, controller, speed, (e) => {
        if (e.type === 'cut' && !values.json) io.out(`${e.timeS.toFixed(1).padStart(8)} s  layer ${e.layer} cut on ${wordFor(CUT_REASON_WORDS, e.reason)}, about ${e.estimatedNm.toFixed(2)} nm`);
      })
    : replayJournal(journal.records, controller);
  warnOfDamage(recorded, io);
  const { truncated, damagedLines } = journal.report;
  const resumedAtS = result.marks.filter((m) => m.mark === 'resumed').map((m) => m.t);
  const differing = result.cuts.filter((c) => c.differs).length;
  if (values.json) {
    io.out(JSON.stringify({ run: journal.header.runId, recipe: recipe.name, truncated, damagedLines, resumedAtS, inputs: result.inputs, differing, layers: result.cuts, firstDifference: result.firstDifference }));
  } else {
    io.out(formatComparison(journal.header.runId, recipe.name, result.inputs, truncated, resumedAtS, result.cuts));
  }
  return 0;
}

function formatComparison(runId: string, recipe: string, inputs: number, truncated: boolean, resumedAtS: number[], cuts: CutComparison[]): string {
  const resumed = resumedAtS.length === 0 ? '' : `; resumed at ${resumedAtS.map((t) => `${t.toFixed(1)} s`).join(', ')}`;
  const rows = [
    `replay of ${runId} with "${recipe}": ${inputs} inputs${truncated ? ' (the journal ends mid-line: read to its last complete line)' : ''}${resumed}`,
    '',
    ' #   recorded cut s   replayed cut s    Δt s   recorded nm  replayed nm   cut on',
  ];
  const f = (x: number | undefined, d: number, w: number): string => (x === undefined || Number.isNaN(x) ? '—' : x.toFixed(d)).padStart(w);
  for (const c of cuts) {
    rows.push(
      `${String(c.layer).padStart(2)} ${f(c.recorded?.timeS, 2, 16)} ${f(c.replayed?.timeS, 2, 16)} ${f(c.deltaTimeS, 2, 8)} ${f(c.recorded?.estimatedNm, 2, 13)} ${f(c.replayed?.estimatedNm, 2, 12)}   ${wordFor(CUT_REASON_WORDS, c.replayed?.reason ?? c.recorded?.reason ?? '')}${c.differs ? '   DIFFERS' : ''}`,
    );
  }
  const n = cuts.filter((c) => c.differs).length;
  rows.push('', n === 0 ? 'every cut is reproduced exactly' : `${n} of ${cuts.length} cuts differ`);
  return rows.join('\n');
}
