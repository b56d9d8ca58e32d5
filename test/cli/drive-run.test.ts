// Every way out of a live run asks every shutter to close and says truthfully what was
// confirmed: the controller failing mid-layer, a signal, an error escaping elsewhere, the
// instruments never answering, a shutter that never confirms; and a failing record does not
// stop the run. The virtual chamber in process, fast, behind the live wiring.
import { EventEmitter } from 'node:events';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { Subject } from 'rxjs';
import { describe, expect, it } from 'vitest';
import { createChamberSource, createVirtualChamber, loadSimProfile } from '../../sim/index.ts';
import { driveRun, type ConfirmingShutters } from '../../src/cli/drive-run.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { createController, type Controller } from '../../src/pipeline/controller.ts';
import { createLiveRun } from '../../src/pipeline/live-run.ts';
import type { OperatorAction, ShutterCommand, ShutterSink } from '../../src/pipeline/types.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const recipe = loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'));
const profile = loadSimProfile(join(root, 'config/sim/ideal.yaml'));
const sources = [...new Set(recipe.layers.map((l) => l.materialName))].sort();

/** The sink's commands recorded; closes confirmed at once, or never. */
function recording(sink: ShutterSink, confirms: boolean): ConfirmingShutters & { sent: ShutterCommand[] } {
  const sent: ShutterCommand[] = [];
  const pending = new Set<string>();
  return {
    sent,
    acks: sink.acks,
    faults: sink.faults,
    send(command) {
      sent.push(command);
      sink.send(command);
      if (command.action === 'close' && !confirms) pending.add(command.source);
    },
    unconfirmedCloses: () => [...pending],
    settled: (timeoutMs) => new Promise((resolve) => (pending.size === 0 ? resolve([]) : setTimeout(() => resolve([...pending]), timeoutMs))),
  };
}

function setUp(options: { controller?: Controller; confirms?: boolean; ready?: Promise<void>; onDecision?: () => void; closeWaitS?: number } = {}) {
  const chamber = createVirtualChamber(recipe, profile, 4);
  const source = createChamberSource(chamber, { speed: 400, periodMs: 5 });
  const shutter = recording(source, options.confirms ?? true);
  const commands = new Subject<{ action: OperatorAction }>();
  const live = createLiveRun({ controller: options.controller ?? createController(recipe), sources: new Map([['chamber', source]]), shutter, commands, runClock: 'instrument' });
  const events = new EventEmitter();
  const lines: string[] = [];
  const io = { out: (t: string) => lines.push(t), err: (t: string) => lines.push(t) };
  const layerStarted = new Promise<void>((resolve) => {
    const watch = (command: ShutterCommand): void => {
      if (command.action === 'open' && command.layer === 2) resolve();
    };
    const send = shutter.send.bind(shutter);
    shutter.send = (command) => {
      send(command);
      watch(command);
    };
  });
  const result = driveRun({
    live,
    commands,
    shutter,
    recipe,
    initial: createController(recipe).initial(),
    ready: options.ready ?? Promise.resolve(),
    start: true,
    io,
    closeWaitS: options.closeWaitS ?? 0.5,
    events,
    onDecision: options.onDecision ?? (() => undefined),
  }).finally(() => source.stop());
  return { result, shutter, events, lines, layerStarted, chamber };
}

/** The closes sent after the n-th command, by source. */
const closesAfter = (sent: ShutterCommand[], from: number): string[] => [...new Set(sent.slice(from).filter((c) => c.action === 'close').map((c) => c.source))].sort();

describe('driveRun: every way out closes the shutters', () => {
  it('completes a run with every close confirmed and sends nothing more', async () => {
    const { result, shutter, lines } = setUp();
    const r = await result;
    expect(r.outcome).toBe('complete');
    expect(r.unconfirmed).toEqual([]);
    expect(shutter.sent.filter((c) => c.action === 'close')).toHaveLength(recipe.layers.length);
    expect(lines.join('\n')).not.toMatch(/asked to close/);
  });

  it('closes every shutter when the controller fails mid-layer, and says so', async () => {
    const base = createController(recipe);
    const failing: Controller = {
      ...base,
      step: (state, input) => {
        if (input.kind === 'reading' && state.phase === 'depositing' && state.index === 1) throw new Error('layer 2 has thickness −1.70 nm; it must be finite and ≥ 0');
        return base.step(state, input);
      },
    };
    const { result, shutter, lines } = setUp({ controller: failing });
    const r = await result;
    expect(r.outcome).toBe('stopped');
    expect(r.reason).toMatch(/the controller failed: layer 2 has thickness/);
    const lastOpen = shutter.sent.findLastIndex((c) => c.action === 'open');
    expect(shutter.sent[lastOpen]).toMatchObject({ layer: 2 });
    expect(closesAfter(shutter.sent, lastOpen + 1)).toEqual(sources);
    expect(lines.join('\n')).toMatch(/every shutter confirmed closed/);
  });

  it('aborts on a signal: the controller closes every shutter, and the way out makes sure', async () => {
    const { result, shutter, events, layerStarted } = setUp();
    await layerStarted;
    const before = shutter.sent.length;
    events.emit('SIGINT');
    const r = await result;
    expect(r.outcome).toBe('aborted');
    expect(closesAfter(shutter.sent, before)).toEqual(sources);
    expect(r.state.phase).toBe('aborted');
  });

  it('stops on an error escaping elsewhere in the process, closing every shutter', async () => {
    const { result, shutter, events, layerStarted } = setUp();
    await layerStarted;
    const before = shutter.sent.length;
    events.emit('uncaughtException', new Error('ENOSPC: no space left on device, write'));
    const r = await result;
    expect(r.outcome).toBe('stopped');
    expect(r.reason).toMatch(/ENOSPC/);
    expect(closesAfter(shutter.sent, before)).toEqual(sources);
  });

  it('stops before starting when the instruments never answer, closing every shutter all the same', async () => {
    const { result, shutter } = setUp({ ready: Promise.reject(new Error('no reading from monitor within 30 s')) });
    const r = await result;
    expect(r.outcome).toBe('stopped');
    expect(r.reason).toMatch(/no reading from monitor/);
    expect(shutter.sent.filter((c) => c.action === 'open')).toEqual([]);
    expect(closesAfter(shutter.sent, 0)).toEqual(sources);
  });

  it('says which closes were not confirmed, and a second signal stops the wait', async () => {
    // A wait longer than the test's own time limit: only the second signal can end it.
    const { result, events, lines, layerStarted } = setUp({ confirms: false, closeWaitS: 3600 });
    await layerStarted;
    events.emit('SIGINT');
    await new Promise((r) => setTimeout(r, 50));
    events.emit('SIGINT');
    const r = await result;
    expect(r.unconfirmed.sort()).toEqual(sources);
    expect(lines.join('\n')).toMatch(new RegExp(`ALERT critical close-unconfirmed: the close of .* is NOT confirmed: close them by hand`));
  });

  it('goes on to the end when recording a decision fails', async () => {
    let calls = 0;
    const { result, lines } = setUp({
      onDecision: () => {
        if (++calls % 50 === 0) throw new Error('ENOSPC: no space left on device');
      },
    });
    const r = await result;
    expect(r.outcome).toBe('complete');
    expect(lines.some((l) => /could not record a decision: ENOSPC/.test(l))).toBe(true);
  });
});
