// A monitor failing mid-layer, a stalled instrument, a shutter that does not acknowledge: each
// placed in run time by the fault relay between the virtual chamber and `fringe run` (a process,
// instrument clock). Each test checks the alert, the fallback, the shutter asked to close, every
// layer cut, and every reading line fringe was handed in the journal.
import { afterAll, afterEach, describe, expect, it } from 'vitest';
import { alertCodes, closesSent, cuts, eventsOf, expectEveryReadingJournalled, intoLayer, journalOf, killChildren, recipe, startFaultRun, type FaultRun } from './fault-run.ts';

const cleanups: FaultRun[] = [];
afterEach(async () => {
  for (const c of cleanups.splice(0)) await c.close();
});
afterAll(killChildren);

const ALL_LAYERS = recipe.layers.map((l) => l.number);

describe('a monitor failing mid-layer, end to end', () => {
  it('the crystal fails 20 s into layer 2 (cut on the crystal): crystal lost, the layer cut on time, its shutter closed', async () => {
    let dropped = 0;
    const fault = await startFaultRun({
      seed: 21,
      // A failed crystal says nothing more, for the rest of the run.
      transform: (line, view) => (line.startsWith('XTL,') && intoLayer(view, 2) >= 20 ? (dropped++, null) : line),
    });
    cleanups.push(fault);
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    expect(dropped).toBeGreaterThan(100);
    const journal = journalOf(fault.runsDir);
    expect(alertCodes(journal)).toEqual(expect.arrayContaining(['crystal-lost', 'time-fallback']));
    const done = cuts(journal);
    expect(done.map((c) => c.layer)).toEqual(ALL_LAYERS);
    expect(done[1]?.reason).toBe('time');
    expect(closesSent(fault.relay)).toContain(2);
    expect(fault.run.out()).toMatch(/ALERT critical crystal-lost/);
    expectEveryReadingJournalled(fault.relay, journal);
  });

  it('the optical signal drops out 30 s into layer 3 (cut on a level) until its end: optical lost, the layer cut on the crystal, its shutter closed', async () => {
    let dropped = 0;
    const fault = await startFaultRun({
      seed: 22,
      transform: (line, view) => (line.startsWith('OPT,') && intoLayer(view, 3) >= 30 && view.openedAtS.length < 4 ? (dropped++, null) : line),
    });
    cleanups.push(fault);
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    expect(dropped).toBeGreaterThan(100);
    const journal = journalOf(fault.runsDir);
    expect(alertCodes(journal)).toEqual(expect.arrayContaining(['optical-lost', 'crystal-fallback']));
    const done = cuts(journal);
    expect(done.map((c) => c.layer)).toEqual(ALL_LAYERS);
    expect(done[2]?.reason).toMatch(/^crystal-/);
    // The monitor is back for layer 4, which is cut on it again.
    expect(done[3]?.reason).not.toMatch(/crystal|time/);
    expect(closesSent(fault.relay)).toContain(3);
    expectEveryReadingJournalled(fault.relay, journal);
  });

  it('the instrument stalls for 4 s of wall time (80 s of run time) in layer 3, then delivers what it held: stale, alerted, nothing lost', async () => {
    let stalled = false;
    const fault = await startFaultRun({
      seed: 23,
      transform: (line, view) => {
        if (!stalled && intoLayer(view, 3) >= 30) {
          stalled = true;
          // Every line from now for 100 ms is held 4 s; those after wait behind them, in order.
          fault.relay.toClient.delayMs = 4000;
          setTimeout(() => (fault.relay.toClient.delayMs = 0), 100);
        }
        return line;
      },
    });
    cleanups.push(fault);
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    expect(stalled).toBe(true);
    expect(fault.run.out()).toMatch(/monitor: stale/);
    const journal = journalOf(fault.runsDir);
    const codes = alertCodes(journal);
    expect(codes).toEqual(expect.arrayContaining(['optical-lost']));
    expect(cuts(journal).map((c) => c.layer)).toEqual(ALL_LAYERS);
    expect(closesSent(fault.relay)).toEqual(expect.arrayContaining(ALL_LAYERS));
    expectEveryReadingJournalled(fault.relay, journal);
  });
});

describe('a shutter that does not acknowledge, end to end', () => {
  it('layer 1’s close unacknowledged until fringe has sent it three times: alerted, re-sent, layer 2 held until confirmed', async () => {
    const first = recipe.layers[0] as (typeof recipe.layers)[number];
    let closesOfFirst = 0;
    let swallowed = 0;
    const fault = await startFaultRun({
      seed: 24,
      transform: (line) => (line.startsWith(`ACK ${first.materialName} CLOSE`) && closesOfFirst < 3 ? (swallowed++, null) : line),
    });
    cleanups.push(fault);
    fault.relay.toUpstream.transform = (line) => {
      if (line.trim() === `SHUTTER ${first.materialName} CLOSE 1`) closesOfFirst++;
      return line;
    };
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    expect(swallowed).toBeGreaterThanOrEqual(1);
    expect(closesOfFirst).toBeGreaterThanOrEqual(3);
    const journal = journalOf(fault.runsDir);
    const codes = alertCodes(journal);
    expect(codes).toEqual(expect.arrayContaining(['shutter-no-ack', 'close-unconfirmed', 'close-confirmed']));
    // Layer 2 opened only after the close of layer 1 was confirmed.
    const events = eventsOf(journal);
    const confirmed = events.findIndex((e) => e.type === 'alert' && e.code === 'close-confirmed');
    const started2 = events.findIndex((e) => e.type === 'layer-started' && e.layer === 2);
    expect(started2).toBeGreaterThan(confirmed);
    const upstream = fault.relay.lines('toUpstream').map((l) => l.line.trim());
    expect(upstream.findIndex((l) => /^SHUTTER \S+ OPEN 2$/.test(l))).toBeGreaterThan(upstream.lastIndexOf(`SHUTTER ${first.materialName} CLOSE 1`));
    expect(cuts(journal).map((c) => c.layer)).toEqual(ALL_LAYERS);
    expectEveryReadingJournalled(fault.relay, journal);
  });
});
