// The model fit through a gap of the optical monitor (issue 12): while the monitor is away the
// crystal, calibrated by the layer's own fit, may cut the layer; when the monitor answers again
// the fit takes the layer back with the readings from both sides of the gap, unless too little
// of the layer is left. Every alert reaches the journal, and the journal replays the run.
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';
import { planRun } from '../../src/model/plan/plan.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { createController, type Controller } from '../../src/pipeline/controller.ts';
import { resumeFloorNm } from '../../src/pipeline/estimators/model-fit.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { replayJournal } from '../../src/pipeline/replay.ts';
import { runIdeal, type IdealRunOptions, type IdealRunResult } from '../support/ideal-chamber.ts';

const mirror = loadRecipe(fileURLToPath(new URL('../../config/recipes/mirror-1064.yaml', import.meta.url)));
const plan1 = planRun(mirror, { suggest: 'none' }).layers[0];
const target1 = mirror.layers[0]?.targetNm as number;

const ofType = <T extends RunEvent['type']>(events: readonly RunEvent[], type: T): Extract<RunEvent, { type: T }>[] =>
  events.filter((e): e is Extract<RunEvent, { type: T }> => e.type === type);
const alertsOf = (events: readonly RunEvent[]): Extract<RunEvent, { type: 'alert' }>[] => ofType(events, 'alert').filter((a) => a.layer === 1);

/** The recipe as the controller takes it, with a crystal that reads `factor` × the truth on every layer (its tooling factor that far off). */
function crystalAhead(recipe: ResolvedRecipe, factor: number): ResolvedRecipe {
  return { ...recipe, layers: recipe.layers.map((l) => ({ ...l, toolingFactor: l.toolingFactor * factor })) };
}

/**
 * Mirror layer 1 (a turning point, 127 nm at 0.3 nm/s: 423 s on the ideal chamber) with the
 * fit, every input and event journalled as a live run does; the run stops after the layer.
 */
function layerOne(controllerRecipe: ResolvedRecipe, run: IdealRunOptions): IdealRunResult & { journal: string } {
  const dir = mkdtempSync(join(tmpdir(), 'fringe-fit-dropout-'));
  const journal = createJournalWriter(dir, { runId: 'dropout', startedAt: '2026-12-05T00:00:00.000Z', recipe: controllerRecipe.name, meta: { estimator: 'fit' } });
  const inner = createController(controllerRecipe, { estimator: 'fit', replan: false });
  const journalled: Controller = {
    ...inner,
    step(state, input) {
      journal.input(input);
      const result = inner.step(state, input);
      for (const e of result.events) journal.event(e);
      return result;
    },
  };
  const result = runIdeal(mirror, journalled, { maxS: 440, ...run });
  journal.close();
  return { ...result, journal: journal.file };
}

describe('the fit through a monitor gap', () => {
  it('the floor below which a returning monitor leaves the layer to the crystal is the plan’s precision over the tooling uncertainty', () => {
    const plan = plan1 as NonNullable<typeof plan1>;
    expect(resumeFloorNm(plan, 1)).toBeCloseTo(plan.precisionNm / 0.01, 9);
    expect(resumeFloorNm(plan, 2)).toBeCloseTo(plan.precisionNm / 0.02, 9);
    expect(resumeFloorNm(plan, 0)).toBe(Number.POSITIVE_INFINITY);
    // Mirror layer 1: a few nanometres of a 127 nm layer (the gaps below are placed around it).
    expect(resumeFloorNm(plan, mirror.crystal.toolingSigmaPercent)).toBeGreaterThan(2.5);
    expect(resumeFloorNm(plan, mirror.crystal.toolingSigmaPercent)).toBeLessThan(9);
  });

  it('a gap mid-layer and back: the crystal (reading 10 % ahead) does not cut in the gap, the fit resumes and cuts optically; both alerts journalled', () => {
    // The crystal alone would cut at 91 % of the layer, 384 s in: inside the gap 378–388 s.
    const run = layerOne(crystalAhead(mirror, 1.1), { opticalSilentS: [378, 388] });
    const modes = ofType(run.events, 'mode-changed').filter((e) => e.layer === 1);
    expect(modes.map((m) => [m.from, m.to])).toEqual([
      ['turning-point', 'crystal'],
      ['crystal', 'turning-point'],
    ]);
    const alerts = alertsOf(run.events);
    const lost = alerts.find((a) => a.code === 'optical-lost');
    const back = alerts.find((a) => a.code === 'mode-restored');
    expect(lost?.severity).toBe('critical');
    expect(lost?.timeS).toBeGreaterThanOrEqual(378);
    expect(lost?.timeS).toBeLessThan(381);
    expect(back?.severity).toBe('info');
    expect(back?.timeS).toBeGreaterThanOrEqual(388 + createController(mirror).options.recoverS);
    expect(back?.message).toContain('both sides of the gap');
    const cut = ofType(run.events, 'cut').find((c) => c.layer === 1);
    expect(cut?.reason).toBe('model-fit');
    expect(cut?.timeS).toBeGreaterThan(back?.timeS as number);
    // Noise-free readings: the fit across the gap lands within a tenth of a nanometre plus the
    // shutter delay's jitter-free growth (the crystal alone: 11 nm thin).
    expect(Math.abs((run.trueNm[0] as number) - target1)).toBeLessThan(0.3);
    // The fit concluded the layer (its index), as for a layer without a gap.
    expect(ofType(run.events, 'layer-finished')[0]?.indexFactor).toBeCloseTo(1, 2);

    const written = readJournal(run.journal).records.flatMap((r) => (r.k === 'e' && r.event.type === 'alert' ? [r.event.code] : []));
    expect(written).toContain('optical-lost');
    expect(written).toContain('mode-restored');
    const replay = replayJournal(readJournal(run.journal).records, createController(crystalAhead(mirror, 1.1), { estimator: 'fit', replan: false }));
    expect(replay.firstDifference).toBeNull();
    expect(replay.cuts.length).toBeGreaterThan(0);
  });

  it('a gap too near the end: back with less than the floor left, the crystal calibrated by the fit keeps the cut, and says so', () => {
    // Back at 414 s, taken at 415 s: 2.5 nm of the layer left, under the floor (~5.6 nm).
    const run = layerOne(mirror, { opticalSilentS: [408, 414] });
    const modes = ofType(run.events, 'mode-changed').filter((e) => e.layer === 1);
    expect(modes.map((m) => m.to)).toEqual(['crystal']);
    const alerts = alertsOf(run.events);
    expect(alerts.map((a) => a.code)).toContain('optical-lost');
    expect(alerts.map((a) => a.code)).not.toContain('mode-restored');
    const late = alerts.filter((a) => a.code === 'optical-back-late');
    expect(late).toHaveLength(1);
    expect(late[0]?.severity).toBe('info');
    expect(late[0]?.message).toMatch(/\(\d+\.\d nm left, under \d+\.\d nm\)/);
    const cut = ofType(run.events, 'cut').find((c) => c.layer === 1);
    expect(cut?.reason).toBe('crystal-calibrated');
    expect(cut?.timeS).toBeGreaterThan(late[0]?.timeS as number);
    expect(Math.abs((run.trueNm[0] as number) - target1)).toBeLessThan(0.3);
    const written = readJournal(run.journal).records.flatMap((r) => (r.k === 'e' && r.event.type === 'alert' ? [r.event.code] : []));
    expect(written).toEqual(expect.arrayContaining(['optical-lost', 'optical-back-late']));
  });

  it('a monitor that never comes back: the crystal reading 10 % ahead is cut where the fit’s calibration puts the target, not 10 % thin', () => {
    const run = layerOne(crystalAhead(mirror, 1.1), { opticalSilentS: [378, 1e9] });
    const cut = ofType(run.events, 'cut').find((c) => c.layer === 1);
    expect(cut?.reason).toBe('crystal-calibrated');
    expect(alertsOf(run.events).map((a) => a.code)).not.toContain('optical-back-late');
    // 45 s on the crystal's clock with the fit's rate: within a nanometre (the crystal alone, 11).
    expect(Math.abs((run.trueNm[0] as number) - target1)).toBeLessThan(1);
  });

  it('a gap before the fit has readings enough: nothing to calibrate with, the plain crystal rule cuts', () => {
    // Silent from the first reading to the end of the layer: the fit never has a reading.
    const run = layerOne(crystalAhead(mirror, 1.1), { opticalSilentS: [0, 1e9] });
    const cut = ofType(run.events, 'cut').find((c) => c.layer === 1);
    expect(cut?.reason).toBe('crystal-thickness');
    expect((run.trueNm[0] as number) / target1).toBeCloseTo(1 / 1.1, 2);
  });
});
