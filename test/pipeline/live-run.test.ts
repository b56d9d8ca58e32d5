// The live wiring on virtual time: the virtual chamber in process as the reading source and the
// shutter sink, the controller deciding, a whole run with no wall-clock waits; and a journal
// played back as a source at its recorded pace.
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { NEVER, Subject, VirtualTimeScheduler, of, toArray } from 'rxjs';
import { describe, expect, it } from 'vitest';
import { createJournalSource } from '../../drivers/index.ts';
import { createChamberSource, createVirtualChamber, loadSimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import type { JournalRecord } from '../../src/journal/journal-format.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { createLiveRun } from '../../src/pipeline/live-run.ts';
import type { Decision } from '../../src/pipeline/operators/index.ts';
import type { Fault, OperatorAction, Reading, ShutterAck, ShutterFault, SourceStatus } from '../../src/pipeline/types.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const recipe = loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'));
const profile = loadSimProfile(join(root, 'config/sim/typical.yaml'));

describe('a live run on virtual time', () => {
  it('runs the AR recipe to the end through the RxJS wiring, shutters answering', () => {
    const scheduler = new VirtualTimeScheduler(undefined, 2_000_000);
    const chamber = createVirtualChamber(recipe, profile, 9);
    const source = createChamberSource(chamber, { speed: 1, scheduler });
    const commands = new Subject<{ action: OperatorAction }>();
    const live = createLiveRun({
      controller: createController(recipe),
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
    const events = decisions.flatMap((d) => d.events);
    expect(events.filter((e) => e.type === 'cut').map((e) => (e as { layer: number }).layer)).toEqual([1, 2, 3, 4]);
    expect(events.at(-1)).toMatchObject({ type: 'run-finished', outcome: 'complete' });
    // The shutter commands reached the chamber: every layer grew to about its target.
    for (const layer of chamber.truth().layers) expect(Math.abs(layer.partNm / (recipe.layers[layer.number - 1]?.targetNm ?? 1) - 1)).toBeLessThan(0.35);
  });
});

describe('links and shutter failures as inputs', () => {
  it('turns a link lost (not by us) and back into alerts, and a shutter failure into an input, on the run clock', () => {
    const scheduler = new VirtualTimeScheduler(undefined, 100_000);
    const readings = new Subject<Reading>();
    const status = new Subject<SourceStatus>();
    const shutterStatus = new Subject<SourceStatus>();
    const faults = new Subject<ShutterFault>();
    const commands = new Subject<{ action: OperatorAction }>();
    const live = createLiveRun({
      controller: createController(recipe),
      sources: new Map([['monitor', { readings, status }]]),
      links: new Map([['shutters', shutterStatus]]),
      shutter: { send: () => undefined, acks: new Subject<ShutterAck>(), faults },
      commands,
      clock: () => scheduler.now() / 1000,
      scheduler,
    });
    const decisions: Decision[] = [];
    const sub = live.decisions.subscribe((d) => decisions.push(d));
    status.next({ state: 'connected' });
    readings.next({ kind: 'reading', channel: 'optical', value: 0.9, timeS: 0, arrivalS: 0 });
    status.next({ state: 'lost', closedByUs: false, detail: 'reset by peer' });
    status.next({ state: 'connecting' });
    status.next({ state: 'lost', closedByUs: false, detail: 'refused' });
    status.next({ state: 'connected' });
    shutterStatus.next({ state: 'lost', closedByUs: true, detail: 'closed' });
    faults.next({ kind: 'shutter-fault', code: 'shutter-not-sent', action: 'close', source: 'SiO2', layer: 1, attempt: 1, final: false, detail: 'link down', timeS: 99 });
    sub.unsubscribe();
    const alerts = decisions.flatMap((d) => d.events.flatMap((e) => (e.type === 'alert' ? [e.code] : [])));
    expect(alerts).toEqual(['source-lost', 'source-restored', 'shutter-not-sent']);
    expect(decisions.at(-1)?.state.unconfirmedCloses).toEqual(['SiO2']);
    // Inputs from outside the lines take the run clock's present, not their own time.
    expect(decisions.at(-1)?.input).toMatchObject({ kind: 'shutter-fault', timeS: 0 });
  });
});

describe('the run clock of the live wiring', () => {
  it('a reading 9,000 s ahead on the instrument clock moves neither the run clock nor the ticks', () => {
    const scheduler = new VirtualTimeScheduler(undefined, 100_000);
    const readings = new Subject<Reading | Fault>();
    const commands = new Subject<{ action: OperatorAction }>();
    const live = createLiveRun({
      controller: createController(recipe),
      sources: new Map([['monitor', { readings, status: of<SourceStatus>({ state: 'connected' }) }]]),
      shutter: { send: () => undefined, acks: NEVER, faults: NEVER },
      commands,
      runClock: 'instrument',
      clock: () => scheduler.now() / 1000,
      scheduler,
    });
    const times: number[] = [];
    const sub = live.decisions.subscribe((d) => times.push(d.state.nowS));
    commands.next({ action: 'start' });
    const crystal = (timeS: number): Reading => ({ kind: 'reading', channel: 'crystal', value: 6e6, timeS, arrivalS: scheduler.now() / 1000 });
    // One reading a second of host time for 5 s, the third stamped 9,000 s ahead; then silence, ticked.
    for (let k = 1; k <= 5; k++) scheduler.schedule(() => readings.next(crystal(k === 3 ? 9003 : k)), k * 1000);
    scheduler.schedule(() => sub.unsubscribe(), 8000);
    scheduler.flush();
    expect(Math.max(...times)).toBeLessThan(9);
    expect(times.at(-1)).toBeGreaterThan(7);
  });
});

describe('the pace of the instrument clock', () => {
  it('ticks through silence at the instruments’ pace, so their readings after a gap come back on time', () => {
    const scheduler = new VirtualTimeScheduler(undefined, 100_000);
    const readings = new Subject<Reading>();
    const live = createLiveRun({
      controller: createController(recipe),
      sources: new Map([['monitor', { readings, status: of<SourceStatus>({ state: 'connected' }) }]]),
      shutter: { send: () => undefined, acks: NEVER, faults: NEVER },
      commands: new Subject<{ action: OperatorAction }>(),
      runClock: 'instrument',
      clock: () => scheduler.now() / 1000,
      scheduler,
    });
    const seen: Decision[] = [];
    const sub = live.decisions.subscribe((d) => seen.push(d));
    // A chamber at 20× real time: a reading every 100 ms of host time, 2 s apart on its own clock, for 5 s; then 3 s of silence.
    for (let k = 0; k <= 50; k++) scheduler.schedule(() => readings.next({ kind: 'reading', channel: 'optical', value: 0.9, timeS: 2 * k, arrivalS: 0 }), 100 * k);
    scheduler.schedule(() => readings.next({ kind: 'reading', channel: 'optical', value: 0.9, timeS: 160, arrivalS: 0 }), 8000);
    scheduler.schedule(() => sub.unsubscribe(), 8100);
    scheduler.flush();
    const ticks = seen.flatMap((d) => (d.input.kind === 'tick' ? [d.input.timeS] : []));
    // Silence from 5 s to 8 s of host time: a tick every 100 ms carries the run clock 1.96 s (20×,
    // taken 2 % low), to within a few seconds of where the chamber's clock is.
    expect(ticks.length).toBeGreaterThanOrEqual(25);
    expect(ticks[1]! - ticks[0]!).toBeCloseTo(0.1 * 0.98 * 20, 6);
    expect(ticks.at(-1)).toBeGreaterThan(155);
    expect(ticks.at(-1)).toBeLessThan(160);
    // The reading after the gap, 60 s on the chamber's clock, is taken, not refused as a jump.
    const after = seen.find((d) => d.input.kind === 'reading' && d.input.timeS === 160);
    expect(after?.state.nowS).toBe(160);
    expect(after?.events).toEqual([]);
  });
});

describe('a journal as a reading source', () => {
  const records: JournalRecord[] = [
    { k: 'r', c: 'o', t: 10, v: 0.5, a: 10 },
    { k: 'e', event: { type: 'run-started', timeS: 10, layers: 1 } },
    { k: 'r', c: 'x', t: 11, v: 5.9e6, a: 11 },
    { k: 'i', t: 11.5, input: { kind: 'fault', channel: 'optical', code: 'garbled', line: 'x', offset: 0, arrivalS: 11.5 } },
    { k: 'r', c: 'o', t: 12, v: 0.6, a: 12 },
  ];

  it('plays readings and faults at their recorded pace × speed, then ends', () => {
    const scheduler = new VirtualTimeScheduler();
    const source = createJournalSource(records, { speed: 2, scheduler });
    const seen: { at: number; kind: string }[] = [];
    const statuses: SourceStatus['state'][] = [];
    source.status.subscribe((s) => statuses.push(s.state));
    let completed = false;
    source.readings.subscribe({ next: (r) => seen.push({ at: scheduler.now(), kind: r.kind }), complete: () => (completed = true) });
    scheduler.flush();
    // Recorded at 10, 11, 11.5 and 12 s: at twice the pace 0, 500, 750 and 1000 ms after the start.
    expect(seen).toEqual([
      { at: 0, kind: 'reading' },
      { at: 500, kind: 'reading' },
      { at: 750, kind: 'fault' },
      { at: 1000, kind: 'reading' },
    ]);
    expect(completed).toBe(true);
    expect(statuses).toEqual(['connecting', 'connected', 'lost']);
  });

  it('plays everything at once at infinite speed, and refuses a speed that is not positive', () => {
    const scheduler = new VirtualTimeScheduler();
    const values: Reading[] = [];
    createJournalSource(records, { speed: Number.POSITIVE_INFINITY, scheduler })
      .readings.pipe(toArray())
      .subscribe((all) => values.push(...(all as Reading[])));
    scheduler.flush();
    expect(values).toHaveLength(4);
    expect(() => createJournalSource(records, { speed: 0 })).toThrow(/speed must be positive/);
  });
});
