// The proposed monitoring strategy: every change it makes lowers the run's cost on the plan's own
// stack figures, the proposal's plan is the plan of the recipe it returns, and the command writes
// a recipe that loads and plans to that cost.
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { planCost, proposeStrategy } from '../../../src/model/plan/propose.ts';
import { planRun } from '../../../src/model/plan/plan.ts';
import { runCli } from '../../support/run-cli.ts';

const root = fileURLToPath(new URL('../../../', import.meta.url));
const ar4File = join(root, 'config/recipes/ar4-visible.yaml');

describe('fringe plan --propose', () => {
  const recipe = loadRecipe(ar4File);
  const proposal = proposeStrategy(recipe);

  it('changes only what lowers the cost, each change by its own step, and ends at its plan', () => {
    expect(proposal.costBefore).toBeCloseTo(planCost(planRun(recipe, { suggest: 'none' })), 9);
    expect(proposal.costAfter).toBeLessThanOrEqual(proposal.costBefore);
    let cost = proposal.costBefore;
    for (const c of proposal.changes) {
      expect(c.costBefore).toBeCloseTo(cost, 9);
      expect(c.costAfter).toBeLessThan(c.costBefore);
      cost = c.costAfter;
    }
    expect(proposal.costAfter).toBeCloseTo(cost, 9);
    expect(planCost(planRun(proposal.recipe, { suggest: 'none' }))).toBeCloseTo(proposal.costAfter, 9);
    // The AR's last layer is better cut at the blue end than at 760 nm (its stack figure halves).
    const four = proposal.changes.find((c) => c.layer === 4);
    expect(four?.to.wavelengthNm).toBeLessThan(760);
    expect(four?.afterPercent).toBeLessThan(four?.beforePercent ?? 0);
  });

  it('writes a recipe that loads, plans to the proposal\'s cost, and says what changed', async () => {
    const out = join(mkdtempSync(join(tmpdir(), 'fringe-propose-')), 'nested', 'proposed.yaml');
    const r = await runCli('plan', ar4File, '--propose', out);
    expect(r.code, r.err).toBe(0);
    expect(r.out).toMatch(/layer 4: trigger level at 760 nm → trigger level at \d+ nm: its stack figure 0\.\d+ % → 0\.\d+ %/);
    const written = loadRecipe(out);
    expect(planCost(planRun(written, { suggest: 'none' }))).toBeCloseTo(proposal.costAfter, 9);
    const bad = await runCli('plan', ar4File, '--propose', join(tmpdir(), 'proposed.txt'));
    expect(bad.code).toBe(2);
    expect(bad.err.trim()).toMatch(/--propose writes a recipe: name a file ending in \.yaml, got ".*proposed\.txt"$/);
  });
});
