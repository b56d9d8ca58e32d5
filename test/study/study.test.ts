// The accuracy study: seeded runs in worker threads, the same seeds for each strategy, reduced
// to per-layer statistics that agree with the single runs they summarise.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadSimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { checkTolerances, wilsonInterval } from '../../src/model/design/tolerances.ts';
import { runOne } from '../../src/study/study-run.ts';
import { runCli } from '../support/run-cli.ts';
import { runStudy } from '../../src/study/study.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const recipe = loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'));
const profile = loadSimProfile(join(root, 'config/sim/typical.yaml'));

describe('fringe study', () => {
  it('runs every strategy on the same seeds in workers and summarises them honestly', async () => {
    const progress: number[] = [];
    const report = await runStudy(recipe, profile, { runs: 3, strategies: ['plain', 'fit'], workers: 2, onProgress: (d) => progress.push(d) });
    expect(progress).toEqual([1, 2, 3, 4, 5, 6]);
    expect(report.results.map((r) => `${r.strategy}:${r.seed}`)).toEqual(['fit:1', 'fit:2', 'fit:3', 'plain:1', 'plain:2', 'plain:3']);
    // A worker's run equals the same run in this thread (determinism by seed).
    const again = runOne(recipe, profile, 'plain', 2);
    expect(report.results.find((r) => r.strategy === 'plain' && r.seed === 2)).toEqual(again);
    const plain = report.strategies.find((s) => s.strategy === 'plain');
    const layer3 = plain?.layers[2];
    const errors = report.results.filter((r) => r.strategy === 'plain').map((r) => r.errorPercent[2] as number);
    expect(layer3?.rmsPercent).toBeCloseTo(Math.sqrt(errors.reduce((s, e) => s + e * e, 0) / errors.length), 12);
    expect(layer3?.worstPercent).toBe(Math.max(...errors.map(Math.abs)));
    expect(layer3?.plannedPercent).toBeGreaterThan(0);
    // Yield: the share of runs meeting every tolerance of the design, with its Wilson interval;
    // per tolerance the worst margin over the runs.
    const plainRuns = report.results.filter((r) => r.strategy === 'plain');
    const met = plainRuns.filter((r) => r.complete && r.toleranceMarginsPp.every((m) => m >= 0)).length;
    expect(plainRuns.map((r) => r.meetsTolerances)).toEqual(plainRuns.map((r) => r.complete && r.toleranceMarginsPp.every((m) => m >= 0)));
    expect(plain?.yieldPercent).toBeCloseTo((100 * met) / 3, 12);
    expect(plain?.yieldIntervalPercent?.low).toBeCloseTo(100 * wilsonInterval(met, 3).low, 12);
    expect(plain?.tolerances).toHaveLength(recipe.design.tolerances.length);
    expect(plain?.tolerances[0]?.worstMarginPp).toBe(Math.min(...plainRuns.map((r) => r.toleranceMarginsPp[0] as number)));
    expect(plain?.tolerances[0]?.tolerance).toMatch(/^R ≤ 0\.6 % over 420–680 nm/);
  });

  it('judges each run on the deposited stack: the margins are those of the true stack', () => {
    const run = runOne(recipe, profile, 'plain', 4);
    expect(run.toleranceMarginsPp).toHaveLength(3);
    // A stack far off the design (every layer 30 % thick) misses the AR's tolerances.
    const thick = { ...recipe.design.stack, layers: recipe.design.stack.layers.map((l) => ({ ...l, thicknessNm: 1.3 * l.thicknessNm })) };
    expect(checkTolerances(thick, recipe.design.tolerances).pass).toBe(false);
    expect(checkTolerances(recipe.design.stack, recipe.design.tolerances).pass).toBe(true);
  });

  it('without tolerances there is no yield', async () => {
    const bare = { ...recipe, design: { ...recipe.design, tolerances: [] } };
    const report = await runStudy(bare, profile, { runs: 1, strategies: ['plain'], workers: 1 });
    expect(report.strategies[0]?.yieldPercent).toBeNull();
    expect(report.strategies[0]?.yieldIntervalPercent).toBeNull();
  });

  it('strategies mean their names whatever the recipe’s compensation block says', () => {
    const block = { enabled: true, boundsPercent: 10, quantity: 'T' as const, stepNm: 5 };
    // A block that is on must not turn the plain rules into compensated ones…
    expect(runOne({ ...recipe, compensation: block }, profile, 'plain', 5)).toEqual(runOne(recipe, profile, 'plain', 5));
    // …and one that is off must not turn fit-compensated into the fit alone.
    const compensated = runOne(recipe, profile, 'fit-compensated', 5);
    expect(runOne({ ...recipe, compensation: { ...block, enabled: false } }, profile, 'fit-compensated', 5)).toEqual(compensated);
    expect(compensated.errorPercent).not.toEqual(runOne(recipe, profile, 'fit', 5).errorPercent);
  });

  it('refuses a compensated strategy for a design without a band, in one sentence', async () => {
    const bandless = { ...recipe, design: { ...recipe.design, band: undefined } };
    await expect(runStudy(bandless, profile, { runs: 1, strategies: ['plain', 'fit-compensated'] })).rejects.toThrow(
      /^strategy "fit-compensated" compensates against the design's spectrum over its band, and the design of ".*" has no band/,
    );
  });

  it('--json carries yieldPercent per strategy', async () => {
    const r = await runCli('study', join(root, 'config/recipes/ar4-visible.yaml'), '--runs', '1', '--workers', '1', '--strategies', 'plain', '--json');
    expect(r.code).toBe(0);
    const parsed = JSON.parse(r.out) as { strategies: { strategy: string; yieldPercent: number }[] };
    expect(parsed.strategies.map((s) => s.strategy)).toEqual(['plain']);
    expect([0, 100]).toContain(parsed.strategies[0]?.yieldPercent);
    const text = await runCli('study', join(root, 'config/recipes/ar4-visible.yaml'), '--runs', '1', '--workers', '1', '--strategies', 'plain');
    expect(text.out).toMatch(/Yield: runs whose final spectrum meets every tolerance \(95 % interval: Wilson score/);
    expect(text.out).toMatch(/plain\s+(0\.0|100\.0) %\s+\((0\.0–79\.3|20\.7–100\.0) %\)/);
  });

  it('refuses an unknown strategy in one sentence', async () => {
    await expect(runStudy(recipe, profile, { runs: 1, strategies: ['magic'] })).rejects.toThrow(/unknown strategy "magic"; the strategies are/);
  });
});
