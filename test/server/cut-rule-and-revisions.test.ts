// What the hub says cuts a layer, and the stack table's figures of finished layers after the
// chip refits: the current figure shown, the revision marked, the first figure kept.
import { describe, expect, it } from 'vitest';
import { CUT_MODE_WORDS, CUT_REASON_WORDS, DASHBOARD_WORDS, ESTIMATOR_WORDS, cutRuleFor, plannedCutWords, wordFor } from '../../src/pipeline/cut-words.ts';
import type { CutReason } from '../../src/pipeline/events.ts';
import { resolvedStack } from '../../src/pipeline/resolved-stack.ts';
import { edge, manualRun, settle } from './support.ts';

describe('the cut rule on show', () => {
  it('names the model fit while it cuts a trigger-level layer, and the plain rule without it', async () => {
    for (const estimator of ['fit', 'plain'] as const) {
      const { hub, run } = manualRun(edge, { estimator });
      // Layer 2 (TiO2) is planned on a trigger level; layer 1 is cut on the crystal.
      while (run.running && run.state.index < 1) run.runUntil(run.nowS + 5);
      run.runUntil(run.nowS + 20);
      await settle();
      const s = hub.snapshot();
      expect(s.status.layer).toBe(2);
      expect(s.status.cut).toBe('level');
      expect(s.estimator).toBe(estimator);
      expect(s.status.cutBy).toBe(estimator === 'fit' ? 'model-fit' : 'trigger-level');
      const row = s.layers[1];
      expect(row?.cutRule).toBe(s.status.cutBy);
      // A finished layer's rule is what cut it.
      expect(s.layers[0]?.cutRule).toBe(s.layers[0]?.cutReason);
    }
  }, 60000);

  it('has words for every code, and keeps an unknown code as it is', () => {
    const reasons: CutReason[] = ['model-fit', 'trigger-level', 'turning-point', 'crystal-thickness', 'crystal-calibrated', 'time', 'thickness-ceiling', 'time-ceiling', 'operator', 'abort'];
    for (const r of reasons) expect(CUT_REASON_WORDS[r]).toMatch(/^[a-z][a-z ,.]+$/);
    expect(Object.keys(CUT_MODE_WORDS).sort()).toEqual(['crystal', 'level', 'time', 'turning-point']);
    expect(wordFor(CUT_REASON_WORDS, 'some-new-reason')).toBe('some-new-reason');
    expect(wordFor(CUT_REASON_WORDS, 'toString')).toBe('toString');
    // The fit cuts optical layers only; a crystal layer is the crystal's, calibrated or not.
    expect(cutRuleFor('level', 'fit')).toBe('model-fit');
    expect(cutRuleFor('turning-point', 'plain')).toBe('turning-point');
    expect(cutRuleFor('crystal', 'fit', true)).toBe('crystal-calibrated');
    expect(plannedCutWords('level', 'fit')).toBe(`${CUT_REASON_WORDS['model-fit']} (plan: ${CUT_MODE_WORDS.level})`);
    expect(DASHBOARD_WORDS.estimator).toBe(ESTIMATOR_WORDS);
    expect(JSON.parse(JSON.stringify(DASHBOARD_WORDS))).toEqual(DASHBOARD_WORDS);
  });
});

describe('finished layers revised by the chip refits', () => {
  it('shows the current figure, marks the row revised, and keeps the figure the log gave', async () => {
    const { hub, run, events } = manualRun(edge, { estimator: 'fit' });
    while (run.running && run.state.index < 8) run.runUntil(run.nowS + 10);
    await settle();
    const s = hub.snapshot();
    const now = resolvedStack(edge, run.state);
    const finished = events.filter((e) => e.type === 'layer-finished');
    expect(finished.length).toBeGreaterThanOrEqual(8);
    for (const f of finished) {
      const row = s.layers[f.layer - 1];
      if (!row) throw new Error(`no row ${f.layer}`);
      expect(row.firstEstimatedNm, `layer ${f.layer}`).toBe(f.estimatedNm);
      expect(row.estimatedNm, `layer ${f.layer}`).toBe(now.partNm[f.layer - 1]);
      expect(row.revised, `layer ${f.layer}`).toBe(Math.abs((row.estimatedNm as number) - f.estimatedNm) >= 0.005);
      expect(row.errorNm).toBeCloseTo((row.estimatedNm as number) - row.targetNm, 3);
    }
    // The refits do move earlier layers by more than the table's 0.01 nm.
    expect(s.layers.filter((r) => r.revised).length).toBeGreaterThan(0);
    // Layers to come have no figure and are never revised.
    const future = s.layers.filter((r) => r.status === 'future');
    expect(future.every((r) => r.estimatedNm === null && r.firstEstimatedNm === null && !r.revised)).toBe(true);
  }, 120000);
});
