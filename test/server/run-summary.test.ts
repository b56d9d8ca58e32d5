// History's figures of a run: the layers deposited (not the recipe's count), and the rms error
// over the layers a rule cut (not the operator's cuts, skipped layers or the one an abort ended).
import { mkdirSync, writeFileSync } from 'node:fs';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { listRuns } from '../../src/server/run-store.ts';
import { buildRunSummary, runFigures } from '../../src/server/run-summary.ts';
import { ar4, manualRun, settle, tempDir } from './support.ts';

describe('a run’s figures in History', () => {
  it('count an aborted run’s deposited layers, and average only the layers a rule cut', async () => {
    const { hub, run } = manualRun(ar4);
    while (run.running && run.state.index < 1) run.runUntil(run.nowS + 2);
    // Layer 2: the operator cuts it early; layer 3: skipped; layer 4: the run is aborted in it.
    run.runUntil(run.nowS + 5);
    expect(hub.command('cut-now').applied).toBe(true);
    while (run.running && run.state.index < 2) run.runUntil(run.nowS + 1);
    run.runUntil(run.nowS + 3);
    expect(hub.command('skip-layer').applied).toBe(true);
    while (run.running && run.state.index < 3) run.runUntil(run.nowS + 1);
    run.runUntil(run.nowS + 3);
    expect(hub.command('abort').applied).toBe(true);
    await settle();

    const summary = buildRunSummary(hub.snapshot(), hub.alertHistory(), { runId: 'aborted', source: 'simulator' });
    expect(summary.outcome).toBe('aborted');
    expect(summary.layers.map((l) => [l.cutReason, l.skipped])).toEqual([
      ['crystal-thickness', false],
      ['operator', false],
      [null, true],
      [null, false],
    ]);
    // Layer 4's shutter had opened: it was deposited in part, and has no estimate.
    expect(summary.layers.map((l) => l.deposited)).toEqual([true, true, true, true]);
    const first = summary.layers[0]?.errorPercent as number;
    expect(summary).toMatchObject({ layersPlanned: 4, layersDeposited: 4, layersCutByRule: 1, rmsErrorPercent: Math.abs(first), rmsTrueErrorPercent: null });

    // The listing reads the same figures from the summary on disk.
    const runsDir = tempDir('history');
    mkdirSync(join(runsDir, 'aborted'));
    writeFileSync(join(runsDir, 'aborted', 'journal.ndjson'), '');
    writeFileSync(join(runsDir, 'aborted', 'summary.json'), JSON.stringify(summary));
    expect(listRuns(runsDir)[0]).toMatchObject({ outcome: 'aborted', layers: 4, layersPlanned: 4, layersCutByRule: 1, rmsErrorPercent: Math.abs(first) });
  }, 60000);

  it('leaves out the layers an abort kept from being deposited, and reads an older summary the same way', () => {
    const layer = (n: number, cutReason: string | null, estimatedNm: number | null, errorPercent: number | null, skipped = false) => ({ number: n, cutReason, estimatedNm, errorPercent, skipped });
    // An older summary has no `deposited`: a layer with an estimate was.
    const layers = [layer(1, 'model-fit', 100, 3), layer(2, 'turning-point', 80, -4), layer(3, 'abort', 10, -90), layer(4, null, null, null), layer(5, null, null, null)];
    expect(runFigures(layers)).toEqual({ layersPlanned: 5, layersDeposited: 3, layersCutByRule: 2, rmsErrorPercent: Math.sqrt((9 + 16) / 2), rmsTrueErrorPercent: null });
    expect(runFigures([{ ...layer(1, 'time', 5, 1), deposited: true }, { ...layer(2, null, null, null), deposited: true }, { ...layer(3, null, null, null), deposited: false }])).toMatchObject({ layersDeposited: 2, layersCutByRule: 1 });
    // No layer cut by a rule: no rms rather than 0.
    expect(runFigures([layer(1, 'operator', 5, 50)])).toMatchObject({ layersDeposited: 1, layersCutByRule: 0, rmsErrorPercent: null });
    // Junk in a hand-edited summary counts as nothing.
    expect(runFigures([{ estimatedNm: 'x' }, {}])).toMatchObject({ layersPlanned: 2, layersDeposited: 0, rmsErrorPercent: null });
  });
});
