// The whole line path — link, framer, decoder, and the link's fresh framer after a reconnect —
// gives the same readings and faults however the transport cuts the bytes, and stamps each with
// the arrival time of the chunk that completed it.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { createLineSource } from '../../drivers/line-source.ts';
import type { LineFramerOptions } from '../../drivers/line-framer.ts';
import type { Transport, TransportEvents } from '../../drivers/transport.ts';
import type { Fault, InstrumentReading } from '../../src/pipeline/types.ts';

const encode = (text: string): Uint8Array => new TextEncoder().encode(text);
const pieces = ['OPT,', 'XTL,', '0.25,', '0.5', '6e6', ',', '\n', '\r', '\r\n', 'é', '😀', 'x'.repeat(9), 'y'.repeat(200), 'z'.repeat(700)];
const stream = fc.oneof(
  fc.uint8Array({ maxLength: 400 }),
  fc.array(fc.oneof(fc.constantFrom(...pieces).map(encode), fc.uint8Array({ maxLength: 4 })), { maxLength: 40 }).map((ps) => Uint8Array.from(ps.flatMap((p) => [...p]))),
);
const framerOptions = fc.record({
  maxLineBytes: fc.oneof(fc.integer({ min: 8, max: 14 }), fc.integer({ min: 801, max: 830 }), fc.constant(1024)),
  newline: fc.constantFrom<'lf' | 'cr'>('lf', 'cr'),
});

/** `data` cut at `cuts`, empty chunks kept. */
function chunksOf(data: Uint8Array, cuts: readonly number[]): Uint8Array[] {
  const points = cuts.map((c) => c % (data.length + 1)).sort((a, b) => a - b);
  let start = 0;
  return [...points, data.length].map((point) => data.slice(start, (start = point)));
}

/** A transport in memory: the test hands it chunks and drops it. */
function memoryTransport(): { transport: Transport; deliver(chunk: Uint8Array): void; drop(): void } {
  const listeners: { [E in keyof TransportEvents]: Set<(...args: TransportEvents[E]) => void> } = { data: new Set(), close: new Set(), error: new Set() };
  return {
    transport: {
      description: 'memory',
      open: () => Promise.resolve(),
      write: () => Promise.resolve(),
      close: () => Promise.resolve(),
      on: (event, listener) => {
        (listeners[event] as Set<typeof listener>).add(listener);
        return () => void (listeners[event] as Set<typeof listener>).delete(listener);
      },
    },
    deliver: (chunk) => listeners.data.forEach((l) => l(chunk)),
    drop: () => listeners.close.forEach((l) => l(undefined)),
  };
}

const nextTurn = (): Promise<void> => new Promise((resolve) => setImmediate(resolve));

/**
 * Each connection's chunks through a line source whose clock reads the count of bytes delivered
 * so far; between connections the transport drops and the link reconnects.
 */
async function throughSource(connections: Uint8Array[][], framer: LineFramerOptions): Promise<Array<InstrumentReading | Fault>> {
  let bytesSoFar = 0;
  const transports: ReturnType<typeof memoryTransport>[] = [];
  const source = createLineSource({
    transport: () => {
      const t = memoryTransport();
      transports.push(t);
      return t.transport;
    },
    clock: () => bytesSoFar,
    framer,
    retry: { initialDelayMs: 0, maxDelayMs: 1 },
    staleAfterS: 1e6,
  });
  const items: Array<InstrumentReading | Fault> = [];
  source.readings.subscribe((item) => items.push(item));
  for (const [i, chunks] of connections.entries()) {
    while (transports.length <= i) await nextTurn();
    await nextTurn();
    for (const chunk of chunks) {
      bytesSoFar += chunk.length;
      transports[i]?.deliver(chunk);
    }
    if (i < connections.length - 1) transports[i]?.drop();
  }
  await source.close();
  return items;
}

const withoutArrival = (items: Array<InstrumentReading | Fault>): unknown[] => items.map(({ arrivalS: _, ...rest }) => rest);

describe('the line source, however the bytes are chunked', () => {
  it('gives the same readings and faults, each stamped with the end of a chunk, in order', async () => {
    await fc.assert(
      fc.asyncProperty(stream, fc.array(fc.nat(), { maxLength: 30 }), framerOptions, async (data, cuts, framer) => {
        const chunks = chunksOf(data, cuts);
        const whole = await throughSource([[data]], framer);
        const split = await throughSource([chunks], framer);
        expect(withoutArrival(split)).toEqual(withoutArrival(whole));
        const chunkEnds = new Set(chunks.map((_, i) => chunks.slice(0, i + 1).reduce((n, c) => n + c.length, 0)));
        const arrivals = split.map((item) => item.arrivalS);
        for (const [i, arrivalS] of arrivals.entries()) {
          expect(chunkEnds.has(arrivalS)).toBe(true);
          if (i > 0) expect(arrivalS).toBeGreaterThanOrEqual(arrivals[i - 1] as number);
        }
      }),
      { numRuns: 400 },
    );
  });

  it('drops the half line of a lost connection and frames the next one afresh, whatever the chunking on either side', async () => {
    await fc.assert(
      fc.asyncProperty(stream, stream, fc.array(fc.nat(), { maxLength: 20 }), fc.array(fc.nat(), { maxLength: 20 }), framerOptions, async (a, b, cutsA, cutsB, framer) => {
        const whole = await throughSource([[a], [b]], framer);
        const split = await throughSource([chunksOf(a, cutsA), chunksOf(b, cutsB)], framer);
        expect(withoutArrival(split)).toEqual(withoutArrival(whole));
        // Each connection counts alone: nothing of the first leaks into the second.
        const first = await throughSource([[a]], framer);
        const second = await throughSource([[b]], framer);
        expect(withoutArrival(whole)).toEqual([...withoutArrival(first), ...withoutArrival(second)]);
      }),
      { numRuns: 200 },
    );
  });
});
