// Faults of the instruments and their links, each placed mid-layer in run time by the fault
// relay between the virtual chamber (over TCP) and `fringe run` (a process, instrument clock):
// each test checks the alert raised, the fallback taken, the shutter asked to close, every layer
// cut, and every reading line fringe was handed in the journal.
import { afterAll, afterEach, describe, expect, it } from 'vitest';
import {
  alertCodes,
  closesSent,
  cuts,
  expectEveryReadingJournalled,
  intoLayer,
  journalOf,
  killChildren,
  parseReadingLine,
  recipe,
  startFaultRun,
  type FaultRun,
} from './fault-run.ts';

const cleanups: FaultRun[] = [];
afterEach(async () => {
  for (const c of cleanups.splice(0)) await c.close();
});
afterAll(killChildren);

const ALL_LAYERS = recipe.layers.map((l) => l.number);

/** A seeded byte generator (xorshift32): the same noise every run. */
function noise(seed: number): (length: number) => string {
  let x = seed >>> 0 || 1;
  return (length) => {
    let text = '';
    for (let i = 0; i < length; i++) {
      x ^= x << 13;
      x >>>= 0;
      x ^= x >>> 17;
      x ^= x << 5;
      x >>>= 0;
      const byte = x & 0xff;
      // Any byte but the line end; latin1, so that each character is one byte on the wire.
      text += String.fromCharCode(byte === 0x0a ? 0x00 : byte);
    }
    return text;
  };
}

describe('instrument faults mid-layer, end to end', () => {
  it('a TCP reset in layer 3: source lost and restored, the run goes on, every layer cut', async () => {
    let resetAt = 0;
    const fault = await startFaultRun({
      seed: 11,
      transform: (line, view) => {
        if (resetAt === 0 && intoLayer(view, 3) >= 30) {
          resetAt = fault.relay.seen;
          setImmediate(() => fault.relay.dropConnection('reset'));
        }
        return line;
      },
    });
    cleanups.push(fault);
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    expect(resetAt).toBeGreaterThan(0);
    expect(fault.relay.connections).toBeGreaterThanOrEqual(2);
    const journal = journalOf(fault.runsDir);
    expect(alertCodes(journal)).toEqual(expect.arrayContaining(['source-lost', 'source-restored']));
    expect(cuts(journal).map((c) => c.layer)).toEqual(ALL_LAYERS);
    expect(closesSent(fault.relay)).toEqual(expect.arrayContaining(ALL_LAYERS));
    // Lines the relay wrote on the first connection in its last moments may die with it.
    expectEveryReadingJournalled(fault.relay, journal, (l) => l.connection === 1 && l.seq > resetAt - 50);
  });

  it('a flood of binary noise in layer 3: every noise line a fault, alerted and counted; the layer cut as planned', async () => {
    const bytes = noise(7);
    let injected = 0;
    const fault = await startFaultRun({
      seed: 12,
      transform: (line, view) => {
        const into = intoLayer(view, 3);
        // 300 lines of noise, one after every reading for 15 s of run time, some over the 200-character limit.
        if (into >= 20 && into < 35 && injected < 300 && parseReadingLine(line)) {
          injected++;
          return [line, bytes(injected % 10 === 0 ? 400 : 1 + (injected % 80))];
        }
        return line;
      },
    });
    cleanups.push(fault);
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    expect(injected).toBe(300);
    const journal = journalOf(fault.runsDir);
    const faults = journal.records.filter((r) => r.k === 'i' && r.input.kind === 'fault');
    expect(faults).toHaveLength(300);
    const codes = alertCodes(journal);
    expect(codes.some((c) => c === 'fault-garbled' || c === 'fault-line-too-long')).toBe(true);
    // Alerted, not flooded: a first alert and then summaries.
    expect(codes.filter((c) => c.startsWith('fault-')).length).toBeLessThan(30);
    const planned = cuts(journal);
    expect(planned.map((c) => c.layer)).toEqual(ALL_LAYERS);
    expect(planned[2]?.reason).not.toMatch(/crystal|time/);
    expectEveryReadingJournalled(fault.relay, journal);
  });

  it('timestamps jumping forwards by 600 s and backwards by 300 s in layer 3: faults, never used, the run clock unmoved', async () => {
    let forward = 0;
    let backward = 0;
    const shifted = new Set<string>();
    const fault = await startFaultRun({
      seed: 13,
      transform: (line, view) => {
        const reading = parseReadingLine(line);
        const into = intoLayer(view, 3);
        if (!reading || into < 20) return line;
        const shift = forward < 10 ? (forward++, 600) : backward < 10 ? (backward++, -300) : 0;
        if (shift === 0) return line;
        shifted.add(`${reading.c} ${(reading.t + shift).toFixed(3)}`);
        return `${reading.c === 'o' ? 'OPT' : 'XTL'},${(reading.t + shift).toFixed(3)},${line.split(',')[2]}`;
      },
    });
    cleanups.push(fault);
    const code = await fault.run.done;
    expect(code, fault.run.out()).toBe(0);
    const journal = journalOf(fault.runsDir);
    expect(alertCodes(journal)).toEqual(expect.arrayContaining(['fault-time-jump']));
    expect(cuts(journal).map((c) => c.layer)).toEqual(ALL_LAYERS);
    // The run clock never took a jumped time: no event carries one.
    const eventTimes = journal.records.flatMap((r) => (r.k === 'e' ? [r.event.timeS] : []));
    for (let i = 1; i < eventTimes.length; i++) expect(eventTimes[i]).toBeGreaterThanOrEqual(eventTimes[i - 1] as number);
    const jumped = journal.records.filter((r) => r.k === 'r' && shifted.has(`${r.c} ${r.t.toFixed(3)}`));
    expect(jumped).toHaveLength(20);
    const lastTrue = Math.max(...journal.records.flatMap((r) => (r.k === 'r' && !shifted.has(`${r.c} ${r.t.toFixed(3)}`) ? [r.t] : [])));
    expect(Math.max(...eventTimes)).toBeLessThan(lastTrue + 10);
    expectEveryReadingJournalled(fault.relay, journal);
  });
});
