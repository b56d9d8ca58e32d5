// A close that is not confirmed keeps the next layer from opening and the run from completing:
// the controller on the virtual chamber, stepped, with the chamber's acknowledgements withheld,
// turned into failures, or released later; and the links' losses alerted.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { createVirtualChamber, loadSimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { createController, type ControllerState } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { createSteppedRun, type SteppedChamber } from '../../src/pipeline/run-stepped.ts';
import type { PipelineInput, ShutterAck } from '../../src/pipeline/types.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const recipe = loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'));
const profile = loadSimProfile(join(root, 'config/sim/ideal.yaml'));
const first = recipe.layers[0] as (typeof recipe.layers)[number];

/** The virtual chamber with its acknowledgements passed through `filter` (dropped where it returns null). */
function chamberWith(filter: (ack: ShutterAck) => PipelineInput | null): SteppedChamber & { withheld: ShutterAck[] } {
  const chamber = createVirtualChamber(recipe, profile, 3);
  const withheld: ShutterAck[] = [];
  return {
    withheld,
    nextReadingTimeS: () => chamber.nextReadingTimeS(),
    advance: (untilS, sink) => chamber.advance(untilS, sink),
    command: (command) => chamber.command(command),
    takeAcks: () =>
      chamber.takeAcks().flatMap((ack) => {
        const passed = filter(ack);
        if (passed === null) withheld.push(ack);
        // The stepped run feeds acknowledgements as they are; a failure rides in the same slot.
        return passed === null ? [] : [passed as ShutterAck];
      }),
  };
}

function run(chamber: SteppedChamber, confirmCloses: boolean) {
  const events: RunEvent[] = [];
  const controller = createController(recipe, { replan: false, confirmCloses });
  const stepped = createSteppedRun(controller, chamber, { onEvent: (e) => events.push(e), maxS: 10_000 });
  const cutAt = (layer: number): number => events.find((e) => e.type === 'cut' && e.layer === layer)?.timeS ?? Number.NaN;
  return { stepped, events, cutAt };
}

const codes = (events: RunEvent[]): string[] => events.flatMap((e) => (e.type === 'alert' ? [e.code] : []));
const started = (events: RunEvent[]): number[] => events.flatMap((e) => (e.type === 'layer-started' ? [e.layer] : []));
const opens = (events: RunEvent[]): number[] => events.flatMap((e) => (e.type === 'shutter' && e.command.action === 'open' ? [e.command.layer] : []));
const isFirstClose = (ack: ShutterAck): boolean => ack.action === 'close' && ack.source === first.materialName;

describe('a close awaiting confirmation', () => {
  it('holds the next layer until the acknowledgement comes, alerting once, then goes on', () => {
    let release = false;
    const chamber = chamberWith((ack) => (isFirstClose(ack) && !release ? null : ack));
    const { stepped, events, cutAt } = run(chamber, true);
    stepped.runUntil(400);
    const cut = cutAt(1);
    expect(cut).toBeGreaterThan(0);
    stepped.runUntil(cut + 120);
    expect(stepped.state.phase).toBe('awaiting-close');
    expect(stepped.state.unconfirmedCloses).toEqual([first.materialName]);
    expect(started(events)).toEqual([1]);
    expect(opens(events)).toEqual([1]);
    expect(codes(events).filter((c) => c === 'close-unconfirmed')).toHaveLength(1);
    // Its shutter may still be open: the layer is not finished, its records still growing.
    expect(events.some((e) => e.type === 'layer-finished')).toBe(false);
    // The acknowledgement arrives two minutes late: the layer finishes, and the run goes on from there and completes.
    release = true;
    for (const ack of chamber.withheld.splice(0)) stepped.apply({ ...ack, timeS: stepped.nowS });
    expect(codes(events)).toContain('close-confirmed');
    expect(events.filter((e) => e.type === 'layer-finished').map((e) => e.timeS)).toEqual([stepped.nowS]);
    expect(started(events)).toEqual([1, 2]);
    stepped.runUntil(Number.POSITIVE_INFINITY);
    expect(events.at(-1)).toMatchObject({ type: 'run-finished', outcome: 'complete' });
    expect(started(events)).toEqual([1, 2, 3, 4]);
  });

  it('never completes a run whose last close is unconfirmed; an abort ends it as aborted', () => {
    const last = recipe.layers.at(-1) as (typeof recipe.layers)[number];
    let lastCut = false;
    const chamber = chamberWith((ack) => (ack.action === 'close' && lastCut ? null : ack));
    const { stepped, events } = run(chamber, true);
    // Small steps: the acknowledgement comes a shutter delay after the cut.
    while (stepped.running && !lastCut) {
      stepped.runUntil(stepped.nowS + 0.02);
      lastCut = events.some((e) => e.type === 'cut' && e.layer === last.number);
    }
    stepped.runUntil(stepped.nowS + 600);
    expect(stepped.state.phase).toBe('awaiting-close');
    expect(events.some((e) => e.type === 'run-finished')).toBe(false);
    stepped.apply({ kind: 'operator', action: 'abort', timeS: stepped.nowS });
    expect(events.at(-1)).toMatchObject({ type: 'run-finished', outcome: 'aborted' });
  });

  it('without confirmCloses, a close the output reports failing holds the run the same way', () => {
    let failed = false;
    const chamber = chamberWith((ack) => {
      if (!isFirstClose(ack) || failed) return ack;
      failed = true;
      return { kind: 'shutter-fault', code: 'shutter-not-sent', action: 'close', source: ack.source, layer: 1, attempt: 1, final: false, detail: 'link down', timeS: ack.timeS };
    });
    const { stepped, events, cutAt } = run(chamber, false);
    stepped.runUntil(400);
    stepped.runUntil(cutAt(1) + 60);
    expect(stepped.state.phase).toBe('awaiting-close');
    expect(codes(events)).toEqual(expect.arrayContaining(['shutter-not-sent', 'close-unconfirmed']));
    expect(started(events)).toEqual([1]);
    // The re-sent close is acknowledged.
    stepped.apply({ kind: 'shutter-ack', action: 'close', source: first.materialName, timeS: stepped.nowS });
    expect(started(events)).toEqual([1, 2]);
  });

  it('goes on when the operator resumes, vouching for the shutter, and says so', () => {
    const chamber = chamberWith((ack) => (isFirstClose(ack) ? null : ack));
    const { stepped, events, cutAt } = run(chamber, true);
    stepped.runUntil(400);
    stepped.runUntil(cutAt(1) + 30);
    expect(stepped.state.phase).toBe('awaiting-close');
    stepped.apply({ kind: 'operator', action: 'resume', timeS: stepped.nowS });
    expect(codes(events)).toContain('operator-confirmed-close');
    expect(started(events)).toEqual([1, 2]);
    expect(stepped.state.unconfirmedCloses).toEqual([]);
  });
});

describe('shutter failures and links, on the controller alone', () => {
  const controller = createController(recipe, { replan: false });
  const step = (s: ControllerState, input: PipelineInput) => controller.step(s, input);
  const startedState = (): ControllerState => step(controller.initial(), { kind: 'operator', action: 'start', timeS: 0 }).state;

  it('waits for a skipped layer’s close without an alarm while it is fresh, and alerts once it outlasts the settling time', () => {
    const confirming = createController(recipe, { replan: false, confirmCloses: true });
    const started = confirming.step(confirming.initial(), { kind: 'operator', action: 'start', timeS: 0 }).state;
    const skipped = confirming.step(started, { kind: 'operator', action: 'skip-layer', timeS: 5 });
    expect(skipped.state.phase).toBe('awaiting-close');
    expect(skipped.events.flatMap((e) => (e.type === 'alert' ? [e.code] : []))).toEqual(['operator-skip']);
    // Acknowledged within the settling time: no alarm, and layer 2 opens.
    const acked = confirming.step(confirming.step(skipped.state, { kind: 'tick', timeS: 5.5 }).state, { kind: 'shutter-ack', action: 'close', source: first.materialName, timeS: 5.6 });
    expect(acked.events.map((e) => e.type)).toEqual(['layer-started', 'shutter']);
    // Not acknowledged: one alert when the settling time has passed, and one when it is confirmed.
    const late = confirming.step(skipped.state, { kind: 'tick', timeS: 5 + confirming.options.settleS });
    expect(late.events.flatMap((e) => (e.type === 'alert' ? [e.code] : []))).toEqual(['close-unconfirmed']);
    expect(confirming.step(late.state, { kind: 'tick', timeS: 9 }).events).toEqual([]);
    const confirmed = confirming.step(late.state, { kind: 'shutter-ack', action: 'close', source: first.materialName, timeS: 9.5 });
    expect(confirmed.events.map((e) => (e.type === 'alert' ? e.code : e.type))).toEqual(['close-confirmed', 'layer-started', 'shutter']);
  });

  it('holds the layer, its shutter asked to close, when its open could not be sent', () => {
    const r = step(startedState(), {
      kind: 'shutter-fault',
      code: 'shutter-not-sent',
      action: 'open',
      source: first.materialName,
      layer: 1,
      attempt: 1,
      final: true,
      detail: 'link down',
      timeS: 0.2,
    });
    expect(r.state.phase).toBe('holding');
    expect(r.events.map((e) => e.type)).toEqual(['alert', 'held', 'shutter']);
    expect(r.events[2]).toMatchObject({ command: { action: 'close', source: first.materialName } });
  });

  it('alerts a close failure at its first attempt and when the output gives up, not at each re-send', () => {
    let s = startedState();
    const alerts: string[] = [];
    for (const [attempt, final] of [[1, false], [2, false], [3, false], [4, true]] as const) {
      const r = step(s, { kind: 'shutter-fault', code: 'shutter-no-ack', action: 'close', source: 'SiO2', layer: 1, attempt, final, detail: 'x', timeS: attempt });
      s = r.state;
      alerts.push(...r.events.flatMap((e) => (e.type === 'alert' ? [e.message] : [])));
    }
    expect(alerts).toHaveLength(2);
    expect(alerts[1]).toMatch(/attempt 4, given up/);
    expect(s.unconfirmedCloses).toEqual(['SiO2']);
  });

  it('raises source-lost when a link goes away and source-restored when it is back, once each', () => {
    let s = startedState();
    const alerts: string[] = [];
    for (const state of ['lost', 'lost', 'connected', 'connected'] as const) {
      const r = step(s, { kind: 'link', link: 'monitor', state, detail: 'reset by peer', timeS: 1 });
      s = r.state;
      alerts.push(...r.events.flatMap((e) => (e.type === 'alert' ? [e.code] : [])));
    }
    expect(alerts).toEqual(['source-lost', 'source-restored']);
  });
});
