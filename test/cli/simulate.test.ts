// fringe simulate: the report, determinism by seed, the journal, and replay determinism over a
// simulated 40-layer run.
import { mkdtempSync, readdirSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadSimProfile } from '../../sim/index.ts';
import { runCli as run } from '../support/run-cli.ts';
import { simulateRun, type SimulationReport } from '../../src/cli/commands/simulate.ts';
import { journalEstimator } from '../../src/journal/journal-format.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { replayJournal } from '../../src/pipeline/replay.ts';
import { fortyLayerRecipe } from '../sim/support.ts';
import { loadMaterialLibrary } from '../../src/config/load-design.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const ar4 = join(root, 'config/recipes/ar4-visible.yaml');

describe('fringe simulate', () => {
  it('--json gives a layers array with true thicknesses and a spectrum block; a seed repeats exactly', async () => {
    const a = await run('simulate', ar4, '--json', '--seed', '4');
    expect(a.code, a.err).toBe(0);
    const report = JSON.parse(a.out) as SimulationReport;
    expect(report.outcome).toBe('complete');
    expect(report.layers).toHaveLength(4);
    for (const l of report.layers) {
      expect(l.trueNm).toBeGreaterThan(0);
      expect(l.errorNm).toBeCloseTo(l.trueNm - l.targetNm, 12);
      expect(l.cutReason).not.toBe('not-cut');
    }
    expect(report.layers.slice(0, 2).map((l) => l.cutReason)).toEqual(['crystal-thickness', 'crystal-thickness']);
    expect(report.spectrum?.fromNm).toBe(420);
    expect(report.spectrum?.maxAbsT).toBeGreaterThanOrEqual(report.spectrum?.meanAbsT ?? Number.NaN);
    const b = await run('simulate', ar4, '--json', '--seed', '4');
    expect(b.out).toBe(a.out);
    const c = await run('simulate', ar4, '--json', '--seed', '5');
    expect(c.out).not.toBe(a.out);
  });

  it('prints a table, and refuses bad options in one line', async () => {
    const t = await run('simulate', ar4, '--seed', '1');
    expect(t.out).toMatch(/rms thickness error/);
    expect(t.out).toMatch(/spectrum of the true stack/);
    for (const [args, message] of [
      [['--seed=-1'], /--seed must be/],
      [['--speed', 'fast'], /--speed expects a number/],
      [['--pty', '/tmp/x'], /go with --serve/],
    ] as const) {
      const r = await run('simulate', ar4, ...args);
      expect(r.code).toBe(2);
      expect(r.err).toMatch(message);
    }
  });

  it('journals a 40-layer run that replays with every decision identical', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-sim-journal-'));
    const recipe = fortyLayerRecipe(10, 10);
    const report = await simulateRun(recipe, {
      profile: loadSimProfile(join(root, 'config/sim/typical.yaml')),
      profileName: 'typical',
      seed: 11,
      speed: Number.POSITIVE_INFINITY,
      journalDir: dir,
      progress: false,
    });
    expect(report.layers).toHaveLength(40);
    const runDir = join(dir, readdirSync(dir)[0] as string);
    expect(JSON.parse(readFileSync(join(runDir, 'summary.json'), 'utf8'))).toMatchObject({ recipe: recipe.name, seed: 11 });
    const journal = readJournal(join(runDir, 'journal.ndjson'));
    // The model fit is the default, and the journal says so: a replay takes it from there.
    expect(journalEstimator(journal.header)).toBe('fit');
    const replay = replayJournal(journal.records, createController(recipe, { estimator: 'fit' }));
    expect(replay.firstDifference).toBeNull();
    expect(replay.cuts).toHaveLength(40);
    expect(replay.cuts.filter((c) => c.differs)).toEqual([]);
    expect(new Set(replay.cuts.map((c) => c.recorded?.reason))).toContain('model-fit');
    // And with a changed recipe, or the plain rules, the replay says where it would have cut instead.
    const changed = { ...recipe, layers: recipe.layers.map((l) => ({ ...l, shutterDelayS: l.shutterDelayS + 1 })) };
    const other = replayJournal(journal.records, createController(changed, { estimator: 'fit' }));
    expect(other.cuts.some((c) => c.differs)).toBe(true);
    const plain = replayJournal(journal.records, createController(recipe, { estimator: 'plain' }));
    expect(plain.cuts.some((c) => c.differs)).toBe(true);
  });
});

describe('fringe simulate: estimator, optical thickness, progress', () => {
  const ideal = join(root, 'config/sim/ideal.yaml');

  it('names the estimator and shows the n·d error beside the physical one', async () => {
    const fit = await run('simulate', ar4, '--seed', '3');
    expect(fit.code, fit.err).toBe(0);
    expect(fit.out).toMatch(/optical layers cut by the model fit \(--estimator fit\)/);
    expect(fit.out).toMatch(/n·d err %/);
    expect(fit.out).toMatch(/optical thickness \(n·d, what the monitor controls\) rms \d+\.\d\d %/);
    const plain = await run('simulate', ar4, '--seed', '3', '--estimator', 'plain', '--json');
    const report = JSON.parse(plain.out) as SimulationReport;
    expect(report.estimator).toBe('plain');
    // The typical chamber's films are 1 % denser in index than the design's (config/sim/typical.yaml):
    // the optical error differs from the physical one.
    for (const l of report.layers) expect(Number.isFinite(l.opticalErrorPercent)).toBe(true);
    expect(report.layers.some((l) => Math.abs(l.opticalErrorPercent - l.errorPercent) > 0.1)).toBe(true);
  });

  it('on a chamber with the design indices the n·d error is the physical error', async () => {
    const r = await run('simulate', ar4, '--profile', ideal, '--json');
    const report = JSON.parse(r.out) as SimulationReport;
    // n_true = n_design, so n·d/(n·d_target) − 1 = d/d_target − 1 (derived).
    for (const l of report.layers) expect(l.opticalErrorPercent).toBeCloseTo(l.errorPercent, 9);
  });

  it('draws one progress bar in place on a terminal at a paced speed, nothing at full speed or off a terminal', async () => {
    const recipe = loadRecipe(ar4, loadMaterialLibrary());
    const profile = loadSimProfile(join(root, 'config/sim/typical.yaml'));
    const drawn = async (isTTY: boolean, speed: number): Promise<string> => {
      let text = '';
      await simulateRun(recipe, { profile, profileName: 'typical', seed: 1, speed, progress: { isTTY, write: (t: string) => (text += t) } });
      return text;
    };
    // ar4 runs ~10 min of run time; at 2,000× a chunk is 100 s of it (runPaced): six redraws in 0.3 s.
    const paced = await drawn(true, 2_000);
    expect(paced).toMatch(/^\r\[[#.]{30}\] layer [12]\/4, /);
    expect(paced.split('\r').length).toBeGreaterThan(3);
    // One line, redrawn in place, ended once.
    expect(paced.indexOf('\n')).toBe(paced.length - 1);
    expect(paced).toMatch(/\[#{30}\] layer 4\/4, [^\r]*\n$/);
    expect(await drawn(true, Number.POSITIVE_INFINITY)).toBe('');
    expect(await drawn(false, 2_000)).toBe('');
  });
});

describe('commands that read a recorded run', () => {
  it('refuse a folder that holds no journal in one sentence', async () => {
    const empty = mkdtempSync(join(tmpdir(), 'fringe-empty-run-'));
    for (const argv of [['replay', empty], ['export', empty, '--csv'], ['run', '--resume', empty]]) {
      const r = await run(...argv);
      expect(r.code, argv.join(' ')).toBe(1);
      expect(r.err, argv.join(' ')).toMatch(/journal\.ndjson cannot be read: no such file/);
      expect(r.err.trim().split('\n')).toHaveLength(1);
    }
  });
});

describe('--estimator', () => {
  it('is refused in one sentence unless fit or plain; a run keeps its own through replay and resume', async () => {
    for (const argv of [
      ['simulate', ar4, '--estimator', 'guess'],
      ['demo', '--estimator', 'guess'],
      ['run', '--chamber', 'x.yaml', ar4, '--estimator', 'guess'],
    ]) {
      const r = await run(...argv);
      expect(r.code, argv.join(' ')).toBe(2);
      expect(r.err, argv.join(' ')).toMatch(/--estimator must be fit or plain, got "guess"/);
      expect(r.err.trim().split('\n')).toHaveLength(1);
    }
    // A run recorded with the plain rules replays with them (and says nothing differs), and with
    // the fit it differs; resuming it with the fit is refused.
    const dir = mkdtempSync(join(tmpdir(), 'fringe-estimator-'));
    const recorded = await run('simulate', ar4, '--estimator', 'plain', '--journal', dir, '--seed', '2');
    expect(recorded.code, recorded.err).toBe(0);
    const runDir = join(dir, readdirSync(dir)[0] as string);
    expect(journalEstimator(readJournal(join(runDir, 'journal.ndjson')).header)).toBe('plain');
    const same = await run('replay', runDir, '--json');
    expect(same.code, same.err).toBe(0);
    expect((JSON.parse(same.out) as { layers: { differs: boolean }[] }).layers.some((l) => l.differs)).toBe(false);
    const other = await run('replay', runDir, '--json', '--estimator', 'fit');
    expect((JSON.parse(other.out) as { layers: { differs: boolean }[] }).layers.some((l) => l.differs)).toBe(true);
    const resumed = await run('run', '--resume', runDir, '--estimator', 'fit');
    expect(resumed.code).toBe(2);
    expect(resumed.err).toMatch(/cuts with the plain rules; it resumes the same way/);
  });
});
