/**
 * `fringe simulate RECIPE`: a whole run on the virtual chamber with the controller cutting each
 * layer, then per layer the target, the true thickness, the error and the cut reason, and the
 * true stack's spectrum against the design.
 */
import { randomUUID } from 'node:crypto';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { parseCommandArgs } from '../parse-command-args.ts';
import { createPtyPair, createVirtualChamber, loadSimProfile, measureParts, serveOnPty, serveOnTcp, trueOpticalErrorPercent, trueStackSpec, type ChamberTruth } from '../../../sim/index.ts';
import { formatMeasuredSpectrum } from '../../calibrate/measured-spectrum.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { createJournalWriter, type JournalWriter } from '../../journal/journal-writer.ts';
import { spectrumDeviation, type SpectrumDeviation } from '../../model/design/spectrum-deviation.ts';
import type { ResolvedRecipe } from '../../model/plan/recipe.ts';
import { createController } from '../../pipeline/controller.ts';
import { CUT_REASON_WORDS, wordFor } from '../../pipeline/cut-words.ts';
import type { CutReason, RunEvent } from '../../pipeline/events.ts';
import { createSteppedRun, runPaced } from '../../pipeline/run-stepped.ts';
import { CliError, estimatorOption, numberOption, outputFileOption, outputFolderOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { createProgressBar, type ProgressSink } from '../progress-bar.ts';

export const DEFAULT_PROFILE = fileURLToPath(new URL('../../../config/sim/typical.yaml', import.meta.url));

export const simulateUsage = `Usage: fringe simulate RECIPE [options]

Runs the recipe on the virtual chamber with fringe cutting every layer, then reports each
layer's true thickness and error and the true stack's spectrum against the design.

  --profile FILE        simulator profile (default: config/sim/typical.yaml)
  --seed N              random seed; the same seed gives the same run (default 1)
  --speed X|max         run at X times real time (a progress bar on a terminal), or as fast as
                        possible (default max)
  --journal DIR         keep the run in DIR/<run id>/ (journal, summary)
  --estimator fit|plain cut optical layers on the model fit (default) or the plain rules
  --json                print one object with a "layers" array and a "spectrum" block
  --materials FILE      material library (default: the shipped config/materials.yaml)
  --measured-out FILE   also write the finished part's spectrum as a spectrophotometer reports it
                        (the true stack over the design's band, 1 nm steps, the profile's
                        spectrophotometer noise), as CSV for fringe calibrate --measured
  --quantity T|R        what --measured-out measures (default T)

  --serve               instead, serve the virtual instruments in fringe's line format, for
                        \`fringe run\` (or anything else) to read, until Ctrl-C:
  --pty PATH            on a pseudo-terminal pair (needs socat); PATH is the host's side
                        (default /tmp/fringe-sim, as in config/chambers/sim-serial.yaml)
  --tcp PORT            on 127.0.0.1:PORT instead (config/chambers/sim-tcp.yaml uses 7301)
`;

export interface SimulatedLayer {
  number: number;
  material: string;
  targetNm: number;
  trueNm: number;
  errorNm: number;
  errorPercent: number;
  /** The true optical thickness n·d at the monitor wavelength against the design's, %: what the monitor controls. */
  opticalErrorPercent: number;
  cutReason: CutReason | 'not-cut';
  estimatedNm: number;
}

export interface SimulationReport {
  recipe: string;
  seed: number;
  profile: string;
  /** How optical layers were cut: the model fit, or the plain rules. */
  estimator: 'fit' | 'plain';
  outcome: 'complete' | 'aborted' | 'incomplete';
  durationS: number;
  layers: SimulatedLayer[];
  spectrum: SpectrumDeviation | null;
  alerts: { code: string; layer: number | null; message: string }[];
  journal?: string;
}

export async function runSimulate(argv: string[], io: CommandIo): Promise<number> {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      profile: { type: 'string' },
      seed: { type: 'string' },
      speed: { type: 'string' },
      journal: { type: 'string' },
      json: { type: 'boolean' },
      materials: { type: 'string' },
      serve: { type: 'boolean' },
      estimator: { type: 'string' },
      pty: { type: 'string' },
      tcp: { type: 'string' },
      'measured-out': { type: 'string' },
      quantity: { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(simulateUsage);
    return 0;
  }
  if (positionals.length !== 1) throw new CliError('simulate needs exactly one RECIPE file (see fringe simulate --help)');
  const seed = numberOption('seed', values.seed) ?? 1;
  if (!Number.isInteger(seed) || seed < 0 || seed > 2 ** 32 - 1) throw new CliError(`--seed must be a whole number from 0 to 4294967295, got ${seed}`);
  const speedText = values.speed ?? 'max';
  const speed = speedText === 'max' ? Number.POSITIVE_INFINITY : (numberOption('speed', speedText) ?? Number.NaN);
  if (!(speed > 0)) throw new CliError(`--speed must be a positive number or "max", got "${speedText}"`);

  const estimator = estimatorOption(values.estimator);
  const recipe = loadRecipe(positionals[0] as string, loadMaterialLibrary(values.materials));
  const profileFile = values.profile ?? DEFAULT_PROFILE;
  const profile = loadSimProfile(profileFile);
  if (values.journal !== undefined && !values.serve) outputFolderOption('journal', values.journal);
  const quantity = values.quantity ?? 'T';
  if (quantity !== 'T' && quantity !== 'R') throw new CliError(`--quantity must be T or R, got "${quantity}"`);
  if (values['measured-out'] !== undefined) {
    if (values.serve) throw new CliError('--measured-out goes with a whole simulated run, not with --serve');
    if (!recipe.design.band) throw new CliError('--measured-out needs the design band (band: {fromNm, toNm} in the design) to measure over');
    outputFileOption('measured-out', values['measured-out']);
  }
  if (values.serve) return serve(recipe, profile, seed, Number.isFinite(speed) ? speed : 1, values, io);
  if (values.pty !== undefined || values.tcp !== undefined) throw new CliError('--pty and --tcp go with --serve');
  const measuredOut = values['measured-out'];
  const report = await simulateRun(recipe, {
    profile,
    profileName: profileFile,
    seed,
    speed,
    journalDir: values.journal,
    estimator,
    ...(measuredOut !== undefined ? { measured: { file: measuredOut, quantity } } : {}),
  });
  io.out(values.json ? JSON.stringify(report) : formatReport(report));
  return report.outcome === 'complete' ? 0 : 1;
}

async function serve(
  recipe: ResolvedRecipe,
  profile: Parameters<typeof createVirtualChamber>[1],
  seed: number,
  speed: number,
  values: { pty?: string | undefined; tcp?: string | undefined },
  io: CommandIo,
): Promise<number> {
  if (values.pty !== undefined && values.tcp !== undefined) throw new CliError('choose one of --pty or --tcp');
  const stop = new Promise<void>((resolve) => {
    process.once('SIGINT', resolve);
    process.once('SIGTERM', resolve);
  });
  if (values.tcp !== undefined) {
    const port = numberOption('tcp', values.tcp) ?? 7301;
    if (!Number.isInteger(port) || port < 0 || port > 65535) throw new CliError(`--tcp must be a port number, got ${values.tcp}`);
    const server = await serveOnTcp({ recipe, profile, seed, speed, port });
    io.out(`virtual instruments on tcp 127.0.0.1:${server.port} at ${speed}× real time (seed ${seed}); Ctrl-C ends`);
    await stop;
    await server.close();
    return 0;
  }
  // socat makes the host's side as a link at PATH: its folder is checked here, so that a refusal names it.
  const pair = await createPtyPair(outputFileOption('pty', values.pty ?? '/tmp/fringe-sim')).catch((error: unknown) => {
    throw new CliError((error as Error).message, 1);
  });
  const served = await serveOnPty(pair, { recipe, profile, seed, speed });
  io.out(`virtual instruments on the serial port ${pair.hostPath} at ${speed}× real time (seed ${seed}); Ctrl-C ends`);
  await stop;
  await served.close();
  pair.close();
  return 0;
}

export interface SimulateOptions {
  profile: Parameters<typeof createVirtualChamber>[1];
  profileName: string;
  seed: number;
  speed: number;
  journalDir?: string | undefined;
  /**
   * Where a paced run (finite speed) draws its progress bar, drawn only on a terminal (default
   * stderr); false: none. A run at full speed draws none: it is over before a bar would tell much.
   */
  progress?: ProgressSink | false;
  /** How optical layers are cut (default fit). */
  estimator?: 'plain' | 'fit';
  /** Where to write the finished part's measured spectrum (CSV), and which quantity. */
  measured?: { file: string; quantity: 'T' | 'R' };
}

/** One whole simulated run; pure apart from the optional journal and progress output. */
export async function simulateRun(recipe: ResolvedRecipe, options: SimulateOptions): Promise<SimulationReport> {
  const chamber = createVirtualChamber(recipe, options.profile, options.seed);
  const estimator = options.estimator ?? 'fit';
  const controller = createController(recipe, { estimator });
  const events: RunEvent[] = [];
  let journal: JournalWriter | undefined;
  if (options.journalDir !== undefined) {
    const runId = `${new Date().toISOString().replace(/[:.]/g, '-')}-${randomUUID().slice(0, 8)}`;
    journal = createJournalWriter(join(options.journalDir, runId), {
      runId,
      startedAt: new Date().toISOString(),
      recipe: recipe.name,
      meta: { source: 'simulator', seed: options.seed, profile: options.profileName, estimator },
    });
    // The recipe as run, resolved against the library of the day, so that a replay needs nothing else.
    try {
      journal.writeFile('recipe.json', `${JSON.stringify(recipe)}\n`);
    } catch (error) {
      journal.close();
      throw error;
    }
  }
  const run = createSteppedRun(controller, chamber, {
    ...(journal ? { onInput: (input) => journal.input(input) } : {}),
    onEvent: (event) => {
      events.push(event);
      journal?.event(event);
    },
  });
  const bar = options.progress !== false && Number.isFinite(options.speed) ? createProgressBar(options.progress) : null;
  const total = run.state.plan.durationS;
  await runPaced(run, options.speed, {
    onChunk: (r) => bar?.update(r.nowS / Math.max(1, total), `layer ${Math.min(r.state.index + 1, recipe.layers.length)}/${recipe.layers.length}, ${formatClock(r.nowS)} of ~${formatClock(total)} run time`),
  });
  bar?.end();
  const truth = chamber.truth();
  const report = buildReport(recipe, truth, events, { ...options, estimator }, run.nowS, run.state.targetsNm);
  if (options.measured) {
    const measured = measureParts(recipe, truth, options.profile, options.seed, options.measured.quantity);
    if (measured) {
      const note = `${recipe.name}: the finished part measured (simulated, seed ${options.seed}, ${options.profileName}; noise ${measured.noisePercent} %)`;
      writeOutputFile(options.measured.file, formatMeasuredSpectrum(measured.quantity, measured.wavelengthsNm, measured.values, note));
    }
  }
  if (journal) {
    try {
      journal.writeFile('summary.json', `${JSON.stringify(report, null, 2)}\n`);
    } finally {
      journal.close();
    }
    report.journal = journal.dir;
  }
  return report;
}

function buildReport(
  recipe: ResolvedRecipe,
  truth: ChamberTruth,
  events: RunEvent[],
  options: SimulateOptions & { estimator: 'fit' | 'plain' },
  nowS: number,
  targetsNm: readonly number[],
): SimulationReport {
  const cuts = new Map<number, Extract<RunEvent, { type: 'cut' }>>();
  const finished = new Map<number, Extract<RunEvent, { type: 'layer-finished' }>>();
  let outcome: SimulationReport['outcome'] = 'incomplete';
  const alerts: SimulationReport['alerts'] = [];
  for (const e of events) {
    if (e.type === 'cut') cuts.set(e.layer, e);
    if (e.type === 'layer-finished') finished.set(e.layer, e);
    if (e.type === 'run-finished') outcome = e.outcome;
    if (e.type === 'alert') alerts.push({ code: e.code, layer: e.layer, message: e.message });
  }
  const layers = recipe.layers.map((layer, i): SimulatedLayer => {
    const trueNm = truth.layers[i]?.partNm ?? 0;
    // A compensated run moves the later targets: each layer is judged against the target it was cut to.
    const targetNm = targetsNm[i] ?? layer.targetNm;
    return {
      number: layer.number,
      material: layer.materialName,
      targetNm,
      trueNm,
      errorNm: trueNm - targetNm,
      errorPercent: (100 * (trueNm - targetNm)) / targetNm,
      opticalErrorPercent: trueOpticalErrorPercent(layer, truth.layers[i], targetNm),
      cutReason: cuts.get(layer.number)?.reason ?? 'not-cut',
      estimatedNm: finished.get(layer.number)?.estimatedNm ?? Number.NaN,
    };
  });
  const band = recipe.design.band;
  let spectrum: SimulationReport['spectrum'] = null;
  if (band) {
    const design = recipe.design.stack;
    const deposited = trueStackSpec(recipe, truth);
    const d = spectrumDeviation(design, deposited, band);
    spectrum = { fromNm: d.fromNm, toNm: d.toNm, stepNm: d.stepNm, maxAbsR: d.maxAbsR, meanAbsR: d.meanAbsR, maxAbsT: d.maxAbsT, meanAbsT: d.meanAbsT };
  }
  return { recipe: recipe.name, seed: options.seed, profile: options.profileName, estimator: options.estimator, outcome, durationS: nowS, layers, spectrum, alerts };
}

function formatReport(r: SimulationReport): string {
  const rows = [
    `${r.recipe}: simulated (seed ${r.seed}, ${r.profile}), optical layers cut by ${ESTIMATOR_WORDS[r.estimator]} (--estimator ${r.estimator}), ${r.outcome}, ${formatClock(r.durationS)} run time`,
    '',
    ' #  material  target nm    true nm   error nm  error %  n·d err %  cut',
  ];
  for (const l of r.layers) {
    rows.push(
      `${String(l.number).padStart(2)}  ${l.material.padEnd(8)} ${l.targetNm.toFixed(2).padStart(9)} ${l.trueNm.toFixed(2).padStart(10)} ${l.errorNm.toFixed(2).padStart(10)} ${l.errorPercent.toFixed(2).padStart(8)} ${l.opticalErrorPercent.toFixed(2).padStart(10)}  ${wordFor(CUT_REASON_WORDS, l.cutReason)}`,
    );
  }
  const physical = spread(r.layers.map((l) => l.errorPercent));
  const optical = spread(r.layers.map((l) => l.opticalErrorPercent));
  rows.push(
    '',
    `rms thickness error ${physical.rms.toFixed(2)} %, worst ${physical.worst.toFixed(2)} %; ` +
      `optical thickness (n·d, what the monitor controls) rms ${optical.rms.toFixed(2)} %, worst ${optical.worst.toFixed(2)} %`,
  );
  if (r.spectrum) {
    const s = r.spectrum;
    rows.push(
      `spectrum of the true stack against the design over ${s.fromNm}–${s.toNm} nm: ` +
        `T max ${(100 * s.maxAbsT).toFixed(2)} pp, mean ${(100 * s.meanAbsT).toFixed(2)} pp; R max ${(100 * s.maxAbsR).toFixed(2)} pp, mean ${(100 * s.meanAbsR).toFixed(2)} pp`,
    );
  }
  if (r.alerts.length > 0) {
    rows.push('', `alerts (${r.alerts.length}):`, ...r.alerts.slice(0, 20).map((a) => `  layer ${a.layer ?? '-'}: ${a.code}: ${a.message}`));
  }
  if (r.journal) rows.push('', `journal: ${r.journal}`);
  return rows.join('\n');
}

const ESTIMATOR_WORDS: Record<SimulationReport['estimator'], string> = { fit: 'the model fit', plain: 'the plain rules' };

/** rms and largest magnitude of the finite values (a layer never deposited has none). */
function spread(values: readonly number[]): { rms: number; worst: number } {
  const finite = values.filter(Number.isFinite);
  if (finite.length === 0) return { rms: Number.NaN, worst: Number.NaN };
  return { rms: Math.sqrt(finite.reduce((s, e) => s + e * e, 0) / finite.length), worst: Math.max(...finite.map(Math.abs)) };
}

function formatClock(seconds: number): string {
  const s = Math.round(seconds);
  return `${Math.floor(s / 3600)}:${String(Math.floor((s % 3600) / 60)).padStart(2, '0')}:${String(s % 60).padStart(2, '0')}`;
}
