// Replaying a journal: from a stream read once, and as `fringe run --resume` rebuilds a run —
// the state replayed from a journal cut mid-layer carries a live model fit that goes on cutting
// exactly as the uninterrupted run did.
import { mkdtempSync, readdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { beforeAll, describe, expect, it } from 'vitest';
import { loadSimProfile } from '../../sim/index.ts';
import { simulateRun } from '../../src/cli/commands/simulate.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { journalEstimator, recordToInput, type JournalRecord } from '../../src/journal/journal-format.ts';
import { openJournal, readJournal } from '../../src/journal/journal-reader.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { createController, liveFitEstimate, type ControllerState } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { replayJournal } from '../../src/pipeline/replay.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
let recipe: ResolvedRecipe;
let file: string;

beforeAll(async () => {
  recipe = loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'));
  const dir = mkdtempSync(join(tmpdir(), 'fringe-replay-'));
  await simulateRun(recipe, { profile: loadSimProfile(join(root, 'config/sim/typical.yaml')), profileName: 'typical', seed: 6, speed: Number.POSITIVE_INFINITY, journalDir: dir, progress: false });
  file = join(dir, readdirSync(dir)[0] as string, 'journal.ndjson');
}, 60_000);

describe('replayJournal', () => {
  it('replays a journal read as a stream, once, exactly as from memory', () => {
    const whole = readJournal(file);
    const fromMemory = replayJournal(whole.records, createController(recipe, { estimator: 'fit' }));
    const stream = openJournal(file, { chunkBytes: 4096 });
    const pulled: JournalRecord[] = [];
    const oncePass = (function* () {
      for (const r of stream.records) {
        pulled.push(r);
        yield r;
      }
    })();
    const streamed = replayJournal(oncePass, createController(recipe, { estimator: journalEstimator(stream.header) }));
    expect(streamed.events).toEqual(fromMemory.events);
    expect(streamed.recordedEvents).toEqual(fromMemory.recordedEvents);
    expect(streamed.recordedEvents.length).toBeGreaterThan(10);
    expect(streamed.cuts).toEqual(fromMemory.cuts);
    expect(streamed.inputs).toBe(fromMemory.inputs);
    expect(streamed.firstDifference).toBeNull();
    // Every record was read, the events after the run's end included, and none twice.
    expect(pulled).toHaveLength(whole.records.length);
  });

  it('rebuilds a run cut off mid-layer with a working fit that cuts where the whole run did', () => {
    const all = readJournal(file).records;
    const estimator = journalEstimator(readJournal(file).header);
    expect(estimator).toBe('fit');
    const started = all.findIndex((r) => r.k === 'e' && r.event.type === 'layer-started' && r.event.layer === 3);
    const cutIndex = all.findIndex((r) => r.k === 'e' && r.event.type === 'cut' && r.event.layer === 3);
    expect(started).toBeGreaterThan(0);
    const crash = started + Math.floor((cutIndex - started) * 0.6);
    const controller = createController(recipe, { estimator });
    const resumed = replayJournal(all.slice(0, crash), controller).state;
    expect(resumed.index).toBe(2);
    expect(resumed.phase).toBe('depositing');
    expect(resumed.fit).not.toBeNull();
    const estimate = liveFitEstimate(recipe, resumed, resumed.nowS);
    expect(estimate?.thicknessNm).toBeGreaterThan(0.3 * (recipe.layers[2]?.targetNm ?? Number.NaN));
    expect(estimate?.sigmaNm).toBeLessThan(1);
    // The live run steps the same controller on from the rebuilt state.
    let state: ControllerState = resumed;
    const after: RunEvent[] = [];
    for (const r of all.slice(crash)) {
      const input = recordToInput(r);
      if (!input) continue;
      const result = controller.step(state, input);
      state = result.state;
      after.push(...result.events);
    }
    const whole = replayJournal(all, createController(recipe, { estimator }));
    expect(after).toEqual(whole.events.slice(whole.events.length - after.length));
    expect(after.find((e) => e.type === 'cut')).toMatchObject({ layer: 3, reason: 'model-fit' });
  });

  it('reports where a resumed session took the run up, and feeds no mark to the controller', () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-replay-mark-'));
    const header = { runId: 'r', startedAt: '2026-12-01T00:00:00.000Z', recipe: recipe.name, meta: {} };
    const w = createJournalWriter(dir, header);
    w.input({ kind: 'operator', action: 'start', timeS: 0 });
    w.input({ kind: 'tick', timeS: 1 });
    w.close();
    createJournalWriter(dir, { ...header, startedAt: '2026-12-01T01:00:00.000Z' }, { resumedAtS: 1 }).close();
    const replay = replayJournal(openJournal(join(dir, 'journal.ndjson')).records, createController(recipe));
    expect(replay.inputs).toBe(2);
    expect(replay.marks).toEqual([{ k: 'm', t: 1, mark: 'resumed', at: '2026-12-01T01:00:00.000Z', meta: {} }]);
  });
});
