// Spectra through the live wiring: they reach every decision's consumer (the journal, the hub) and
// change no decision of the controller, which does not use them yet.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Subject, VirtualTimeScheduler } from 'rxjs';
import { describe, expect, it } from 'vitest';
import { createChamberSource, createVirtualChamber, loadSimProfile, SimProfileSchema, type SimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { createLiveRun } from '../../src/pipeline/live-run.ts';
import type { Decision } from '../../src/pipeline/operators/index.ts';
import type { OperatorAction } from '../../src/pipeline/types.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const recipe = loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'));
const typical = loadSimProfile(join(root, 'config/sim/typical.yaml'));

function liveRun(profile: SimProfile): Decision[] {
  const scheduler = new VirtualTimeScheduler(undefined, 2_000_000);
  const source = createChamberSource(createVirtualChamber(recipe, profile, 9), { speed: 1, scheduler });
  const commands = new Subject<{ action: OperatorAction }>();
  const live = createLiveRun({
    controller: createController(recipe, { estimator: 'fit' }),
    sources: new Map([['chamber', source]]),
    shutter: source,
    commands,
    runClock: 'instrument',
    clock: () => scheduler.now() / 1000,
    scheduler,
  });
  const decisions: Decision[] = [];
  const sub = live.decisions.subscribe((d) => {
    decisions.push(d);
    if (d.events.some((e) => e.type === 'run-finished')) source.stop();
  });
  commands.next({ action: 'start' });
  scheduler.flush();
  sub.unsubscribe();
  return decisions;
}

describe('spectra in a live run', () => {
  it('are left alone by the controller: the same state, no event, the clock where it was', () => {
    const controller = createController(recipe, { estimator: 'fit' });
    let state = controller.initial();
    for (const input of [{ kind: 'reading', channel: 'optical', value: 0.9, timeS: 1, arrivalS: 1 }, { kind: 'operator', action: 'start', timeS: 1 }] as const) state = controller.step(state, input).state;
    const grid = Float64Array.of(400, 500);
    const result = controller.step(state, { kind: 'spectrum', channel: 'spectral', wavelengthsNm: grid, values: Float64Array.of(0.9, 0.8), timeS: 30, arrivalS: 30 });
    expect(result.state).toBe(state);
    expect(result.events).toEqual([]);
  });

  it('pass through to the decisions’ consumers and leave every decision as it was', () => {
    const plain = liveRun(typical);
    const spectral = liveRun(SimProfileSchema.parse({ ...typical, spectral: { rateHz: 2, resolutionNm: 0 } }));
    const spectra = spectral.filter((d) => d.input.kind === 'spectrum');
    const runS = spectral.flatMap((d) => d.events).find((e) => e.type === 'run-finished')?.timeS ?? 0;
    expect(runS).toBeGreaterThan(100);
    expect(spectra.length).toBeGreaterThan(runS * 2 * 0.95);
    expect(spectra.every((d) => d.events.length === 0)).toBe(true);
    // Everything else the controller saw and decided, in order, is the same.
    const others = (ds: Decision[]): unknown[] => ds.filter((d) => d.input.kind !== 'spectrum').map((d) => [d.input, d.events]);
    expect(others(spectral)).toEqual(others(plain));
    expect(plain.flatMap((d) => d.events).filter((e) => e.type === 'cut')).toHaveLength(4);
  });
});
