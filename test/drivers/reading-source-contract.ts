// The contract every ReadingSource keeps, as a suite any driver kind can run: the serial and TCP
// line sources here, and the journal replay and the simulator when they arrive.
import { describe, expect, it } from 'vitest';
import type { Fault, InstrumentReading, Reading, ReadingSource, SourceStatus } from '../../src/pipeline/types.ts';

export interface ContractSubject {
  readonly source: ReadingSource & { close(): Promise<void> };
  /** Makes the instrument send text; absent for real hardware, which speaks on its own. */
  readonly send?: (text: string) => void | Promise<void>;
  readonly teardown?: () => Promise<void>;
}

async function until(condition: () => boolean, what: string, timeoutMs: number): Promise<void> {
  const start = performance.now();
  while (!condition()) {
    if (performance.now() - start > timeoutMs) throw new Error(`timed out after ${timeoutMs} ms waiting for ${what}`);
    await new Promise((resolve) => setTimeout(resolve, 2));
  }
}

export function readingSourceContract(name: string, setup: () => Promise<ContractSubject>, timeoutMs = 3000): void {
  async function withSubject(body: (subject: ContractSubject, seen: { readings: Array<InstrumentReading | Fault>; statuses: SourceStatus[]; errors: unknown[]; completed: number }) => Promise<void>): Promise<void> {
    const subject = await setup();
    const seen = { readings: [] as Array<InstrumentReading | Fault>, statuses: [] as SourceStatus[], errors: [] as unknown[], completed: 0 };
    subject.source.readings.subscribe({ next: (r) => seen.readings.push(r), error: (e: unknown) => seen.errors.push(e), complete: () => (seen.completed += 1) });
    subject.source.status.subscribe({ next: (s) => seen.statuses.push(s), error: (e: unknown) => seen.errors.push(e), complete: () => (seen.completed += 1) });
    try {
      await body(subject, seen);
    } finally {
      await subject.source.close();
      await subject.teardown?.();
    }
  }

  describe(`ReadingSource contract: ${name}`, () => {
    it('reports connecting first, then connected', () =>
      withSubject(async (_subject, seen) => {
        await until(() => seen.statuses.some((s) => s.state === 'connected'), 'connected', timeoutMs);
        expect(seen.statuses[0]?.state).toBe('connecting');
      }));

    it('delivers readings in order, with finite run times and arrival times', () =>
      withSubject(async (subject, seen) => {
        await until(() => seen.statuses.some((s) => s.state === 'connected'), 'connected', timeoutMs);
        await subject.send?.('OPT,1.0,0.40\nOPT,1.1,0.41\nXTL,1.1,5990000\n');
        await until(() => seen.readings.filter((r) => r.kind === 'reading').length >= 3, 'three readings', timeoutMs);
        const readings = seen.readings.filter((r): r is Reading => r.kind === 'reading');
        for (const r of readings) {
          expect(Number.isFinite(r.timeS) && Number.isFinite(r.arrivalS) && Number.isFinite(r.value)).toBe(true);
        }
        for (let i = 1; i < readings.length; i++) expect((readings[i] as Reading).arrivalS).toBeGreaterThanOrEqual((readings[i - 1] as Reading).arrivalS);
        if (subject.send) expect(readings.slice(0, 3).map((r) => [r.channel, r.timeS, r.value])).toEqual([['optical', 1, 0.4], ['optical', 1.1, 0.41], ['crystal', 1.1, 5990000]]);
      }));

    it('delivers a bad line as a fault, and keeps going', ({ skip }) => {
      return withSubject(async (subject, seen) => {
        if (!subject.send) skip('an instrument cannot be made to send a bad line');
        await until(() => seen.statuses.some((s) => s.state === 'connected'), 'connected', timeoutMs);
        await subject.send?.('OPT,2.0,bad\nOPT,2.1,0.5\n');
        await until(() => seen.readings.length >= 2, 'a fault and a reading', timeoutMs);
        expect(seen.readings.map((r) => r.kind)).toEqual(['fault', 'reading']);
        expect(seen.errors).toEqual([]);
      });
    });

    it('ends with lost(closedByUs) and completes both streams when closed', () =>
      withSubject(async (subject, seen) => {
        await until(() => seen.statuses.some((s) => s.state === 'connected'), 'connected', timeoutMs);
        await subject.source.close();
        expect(seen.statuses.at(-1)).toMatchObject({ state: 'lost', closedByUs: true });
        expect(seen.completed).toBe(2);
        expect(seen.errors).toEqual([]);
      }));
  });
}
