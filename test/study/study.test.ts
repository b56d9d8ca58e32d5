// The accuracy study: seeded runs in worker threads, the same seeds for each strategy, reduced
// to per-layer statistics that agree with the single runs they summarise.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadSimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { runOne } from '../../src/study/study-run.ts';
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
  });

  it('refuses an unknown strategy in one sentence', async () => {
    await expect(runStudy(recipe, profile, { runs: 1, strategies: ['magic'] })).rejects.toThrow(/unknown strategy "magic"; the strategies are/);
  });
});
