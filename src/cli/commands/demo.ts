/**
 * `fringe demo`: a simulated run of the shipped edge filter on the virtual chamber, paced at a
 * brisk multiple of real time, with the live dashboard served on 127.0.0.1. The run is recorded
 * in the runs folder like any other; the server keeps serving after it ends, until interrupted.
 * An interrupt aborts a run still going, as the operator's abort would, and stops the server.
 */
import { fileURLToPath } from 'node:url';
import { parseCommandArgs } from '../parse-command-args.ts';
import { loadSimProfile } from '../../../sim/index.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { generateToken, isLoopback } from '../../server/auth.ts';
import { buildServer } from '../../server/build-server.ts';
import { startSimulatedRun } from '../../server/simulated-run.ts';
import { allowHostOption, CliError, estimatorOption, numberOption, outputFolderOption } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { untilStopped } from '../until-stopped.ts';
import { DEMO_RUNS_KEPT, pruneDemoRuns } from '../demo-runs.ts';
import { PLANT_OPTIONS, plantPlan, plantUsage, startPlant, stopPlant } from '../plant-options.ts';
import { DEFAULT_PROFILE } from './simulate.ts';

export const DEFAULT_DEMO_RECIPE = fileURLToPath(new URL('../../../config/recipes/edge-longpass-visible.yaml', import.meta.url));

export const demoUsage = `Usage: fringe demo [options]

Runs a simulated coating run on the virtual chamber and serves the live dashboard: the trace of
every layer against its prediction, the stack, the crystal, the outcome spectrum and the log,
with the controls. The run is kept in the runs folder, marked as the demo's; of the demo's runs
only the last few are kept (older ones are removed at start; any other run is never touched).
The server stays up after the run ends.
Ctrl-C stops everything: a run still going is aborted (its shutters closed, the abort
journalled) and the dashboard stops.

  --recipe FILE         recipe to run (default: config/recipes/edge-longpass-visible.yaml)
  --profile FILE        simulator profile (default: config/sim/typical.yaml)
  --seed N              random seed (default 1)
  --estimator fit|plain cut optical layers on the model fit (default) or the plain rules
  --speed X             run at X times real time (default 60)
  --port N              port to listen on (default 7300; 0 picks a free one)
  --host ADDRESS        address to bind (default 127.0.0.1); anything wider needs a viewer token
  --allow-host NAME     another name the dashboard answers to (repeat, or NAME,NAME; NAME:PORT for
                        a forwarded port): it answers only to 127.0.0.1, localhost, [::1], the
                        bound address and the address it was reached at; any other Host gets 421
  --runs DIR            runs folder: where this run is kept and past runs are listed (default runs)
  --keep-demo-runs N    demo runs kept in the runs folder, this one included (default ${DEMO_RUNS_KEPT})
  --materials FILE      material library (default: the shipped config/materials.yaml)
${plantUsage}
A command token is made at start and printed once: enter it on the dashboard to use the controls.
`;

export interface DemoHooks {
  /** Stops the server (and the run) when aborted; otherwise SIGINT and SIGTERM do. */
  signal?: AbortSignal;
  /** Called once listening, with the address. */
  onListening?: (info: { url: string; token: string; viewerToken: string | undefined }) => void;
}

export async function runDemo(argv: string[], io: CommandIo, hooks: DemoHooks = {}): Promise<number> {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      recipe: { type: 'string' },
      profile: { type: 'string' },
      seed: { type: 'string' },
      estimator: { type: 'string' },
      speed: { type: 'string' },
      port: { type: 'string' },
      host: { type: 'string' },
      'allow-host': { type: 'string', multiple: true },
      runs: { type: 'string' },
      'keep-demo-runs': { type: 'string' },
      materials: { type: 'string' },
      ...PLANT_OPTIONS,
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(demoUsage);
    return 0;
  }
  if (positionals.length > 0) throw new CliError(`demo takes no positional arguments, got "${positionals[0]}" (see fringe demo --help)`);
  const speed = numberOption('speed', values.speed) ?? 60;
  if (!(speed > 0) || speed > 100000) throw new CliError(`--speed must be a positive number up to 100000, got ${speed}`);
  const port = numberOption('port', values.port) ?? 7300;
  if (!Number.isInteger(port) || port < 0 || port > 65535) throw new CliError(`--port must be a whole number from 0 to 65535, got ${port}`);
  const seed = numberOption('seed', values.seed) ?? 1;
  if (!Number.isInteger(seed) || seed < 0 || seed > 2 ** 32 - 1) throw new CliError(`--seed must be a whole number from 0 to 4294967295, got ${seed}`);
  const keep = numberOption('keep-demo-runs', values['keep-demo-runs']) ?? DEMO_RUNS_KEPT;
  if (!Number.isInteger(keep) || keep < 1 || keep > 10000) throw new CliError(`--keep-demo-runs must be a whole number from 1 to 10000, got ${keep}`);
  const host = values.host ?? '127.0.0.1';
  const allowedHosts = allowHostOption(values['allow-host']);

  const recipe = loadRecipe(values.recipe ?? DEFAULT_DEMO_RECIPE, loadMaterialLibrary(values.materials));
  const profileFile = values.profile ?? DEFAULT_PROFILE;
  const profile = loadSimProfile(profileFile);
  const runsDir = outputFolderOption('runs', values.runs ?? 'runs');
  // Room for this run among the demo's last few.
  const pruned = pruneDemoRuns(runsDir, keep - 1);
  const plant = plantPlan(values, 'demo');

  const token = generateToken();
  const exposed = !isLoopback(host);
  const viewerToken = exposed ? generateToken() : undefined;
  const stop = new AbortController();
  const estimator = estimatorOption(values.estimator);
  const simulated = startSimulatedRun({ recipe, profile, profileName: profileFile, seed, speed, journalDir: runsDir, signal: stop.signal, controller: { estimator }, meta: { demo: true } });
  const app = buildServer({ hub: simulated.hub, runsDir }, { token, viewerToken, host, allowedHosts });

  let address: string;
  try {
    address = await app.listen({ port, host });
  } catch (error) {
    stop.abort();
    await simulated.done.catch(() => undefined);
    throw new CliError(`cannot listen on ${host}:${port}: ${(error as Error).message}`, 1);
  }
  const url = `${address.replace('[::1]', 'localhost')}/`;
  io.out(`fringe demo: "${recipe.name}" on the virtual chamber at ${speed}× real time (seed ${seed})`);
  io.out(`dashboard: ${viewerToken ? `${url}?viewer=${viewerToken}` : url}`);
  io.out(`command token (enter it on the dashboard to use the controls; it is shown only now): ${token}`);
  if (exposed) {
    io.err(
      `fringe demo: warning: listening on ${host}, beyond this machine. Viewing needs the viewer token in the address above; ` +
        'the command token controls the run: keep both to the people at the chamber.',
    );
  }
  io.out(`run kept in ${simulated.dir ?? runsDir}`);
  if (pruned.length > 0) io.out(`removed ${pruned.length} older demo run${pruned.length === 1 ? '' : 's'} from ${runsDir} (the demo keeps its last ${keep}; other runs are never removed)`);
  io.out("fringe is process control, not a safety system: interlocks, manual shutter controls and the equipment maker's instructions stay in charge.");
  const publisher = plant ? startPlant(plant, simulated.hub, simulated.note, io) : undefined;
  publisher?.setDashboard(url);
  hooks.onListening?.({ url, token, viewerToken });

  // A run that ends by itself leaves the dashboard up to look at; Ctrl-C is said below.
  simulated.done.then(
    (summary) => {
      if (!stop.signal.aborted) io.out(`run ${summary.outcome} after ${Math.round(summary.durationS)} s of run time; the dashboard stays up (Ctrl-C to stop it)`);
    },
    (error: unknown) => io.err(`fringe demo: the simulated run failed: ${(error as Error).message}`),
  );

  await untilStopped(hooks.signal);
  const stillRunning = simulated.run.running;
  stop.abort();
  const summary = await simulated.done.catch(() => undefined);
  await stopPlant(publisher, io);
  await app.close();
  io.out(
    stillRunning && summary
      ? `stopped: the simulated run was aborted after ${Math.round(summary.durationS)} s of run time, its shutters closed (kept in ${simulated.dir ?? runsDir}); the dashboard has stopped`
      : 'stopped: the dashboard has stopped',
  );
  return 0;
}
