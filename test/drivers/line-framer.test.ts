// The line framer: LF and CRLF (and CR) terminators, over-long lines reported once and
// resynchronised, bounded buffering, and lines that do not depend on how the bytes were chunked.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { ConfigError } from '../../src/config/validation.ts';
import { createLineFramer, type LineFramerOptions } from '../../drivers/line-framer.ts';
import type { Fault } from '../../src/pipeline/types.ts';

const bytes = (text: string): Uint8Array => new TextEncoder().encode(text);

/** Feeds `data` cut at `cuts` (positions, any order, duplicates allowed) and collects the output. */
function frame(data: Uint8Array, cuts: readonly number[], options: LineFramerOptions = {}): Array<string | Fault> {
  const framer = createLineFramer(options);
  const points = [...new Set(cuts.map((c) => c % (data.length + 1)))].sort((a, b) => a - b);
  const out: Array<string | Fault> = [];
  let start = 0;
  for (const point of [...points, data.length]) {
    out.push(...framer.push(data.subarray(start, point), 7));
    start = point;
  }
  return out;
}

describe('createLineFramer', () => {
  it('splits on LF and drops the CR of CRLF', () => {
    expect(frame(bytes('OPT,1,0.5\nXTL,1,6e6\r\n\nlast'), [])).toEqual(['OPT,1,0.5', 'XTL,1,6e6', '']);
  });

  it('keeps a partial line until its terminator arrives, across chunks', () => {
    const framer = createLineFramer();
    expect(framer.push(bytes('OPT,1'))).toEqual([]);
    expect(framer.bufferedBytes).toBe(5);
    expect(framer.push(bytes(',0.5'))).toEqual([]);
    expect(framer.push(bytes('\r'))).toEqual([]);
    expect(framer.push(bytes('\nXT'))).toEqual(['OPT,1,0.5']);
    expect(framer.bufferedBytes).toBe(2);
    framer.reset();
    expect(framer.bufferedBytes).toBe(0);
    expect(framer.push(bytes('L,2,6e6\n'))).toEqual(['L,2,6e6']);
  });

  it('decodes a UTF-8 character split between chunks', () => {
    const data = bytes('T=25 °C\n');
    const degree = data.indexOf(0xc2);
    expect(frame(data, [degree + 1])).toEqual(['T=25 °C']);
  });

  it('keeps a CR that does not end the line in lf mode', () => {
    expect(frame(bytes('a\rb\n'), [])).toEqual(['a\rb']);
  });

  it('in cr mode ends lines on CR and takes CRLF as one terminator, also when split', () => {
    const data = bytes('one\rtwo\r\nthree\r\n\rfour');
    expect(frame(data, [], { newline: 'cr' })).toEqual(['one', 'two', 'three', '']);
    expect(frame(data, [8], { newline: 'cr' })).toEqual(['one', 'two', 'three', '']);
  });

  it('reports an over-long line once, drops the rest and resynchronises at the next newline', () => {
    const long = 'X'.repeat(50);
    const out = frame(bytes(`ok\n${long}\nnext\n`), [10, 20, 30], { maxLineBytes: 16 });
    expect(out).toHaveLength(3);
    expect(out[0]).toBe('ok');
    expect(out[1]).toMatchObject({ kind: 'fault', code: 'line-too-long', channel: 'unknown', offset: 16, arrivalS: 7 });
    expect((out[1] as Fault).line).toBe('X'.repeat(16));
    expect(out[2]).toBe('next');
  });

  it('never buffers more than maxLineBytes, even when no newline ever comes', () => {
    const framer = createLineFramer({ maxLineBytes: 64 });
    const faults: Fault[] = [];
    for (let i = 0; i < 1000; i++) {
      for (const item of framer.push(bytes('0123456789'))) if (typeof item !== 'string') faults.push(item);
      expect(framer.bufferedBytes).toBeLessThanOrEqual(64);
    }
    expect(faults).toHaveLength(1);
  });

  it('keeps a fault excerpt of at most 200 characters', () => {
    const out = frame(bytes(`${'y'.repeat(5000)}\n`), [], { maxLineBytes: 4096 });
    expect(out).toHaveLength(1);
    expect((out[0] as Fault).line).toBe('y'.repeat(200));
  });

  it('refuses a bad option, naming it', () => {
    expect(() => createLineFramer({ maxLineBytes: 0 })).toThrow(ConfigError);
    expect(() => createLineFramer({ maxLineBytes: 0 })).toThrow(/maxLineBytes/);
    expect(() => createLineFramer({ newline: 'crlf' } as unknown as LineFramerOptions)).toThrow(/newline/);
    expect(() => createLineFramer({ maxLineLength: 10 } as unknown as LineFramerOptions)).toThrow(/maxLineLength/);
  });
});

describe('createLineFramer properties', () => {
  const lineText = fc.string({ unit: fc.constantFrom('a', 'Z', '0', '9', ',', '.', ' ', '\r', 'é', '€'), maxLength: 40 });

  it('gives the same lines for any chunking, equal to splitting the text at its newlines', () => {
    fc.assert(
      fc.property(fc.array(lineText, { maxLength: 20 }), lineText, fc.array(fc.nat(), { maxLength: 30 }), fc.integer({ min: 8, max: 48 }), (lines, tail, cuts, max) => {
        const text = lines.map((l) => `${l}\n`).join('') + tail;
        const data = bytes(text);
        const out = frame(data, cuts, { maxLineBytes: max });
        expect(out).toEqual(frame(data, [], { maxLineBytes: max }));
        // The expected lines, from the text itself: each complete line, its final CR dropped,
        // or a fault when its bytes (CR included) pass the limit.
        const expected = lines.map((l) => (bytes(l).length > max ? 'fault' : l.endsWith('\r') ? l.slice(0, -1) : l));
        if (bytes(tail).length > max) expected.push('fault');
        expect(out.map((item) => (typeof item === 'string' ? item : item.code === 'line-too-long' ? 'fault' : item.code))).toEqual(expected);
      }),
    );
  });

  it('never throws on random bytes, stays bounded, and yields one line or fault per terminator', () => {
    fc.assert(
      fc.property(fc.uint8Array({ maxLength: 400 }), fc.array(fc.nat(), { maxLength: 20 }), fc.constantFrom<'lf' | 'cr'>('lf', 'cr'), (data, cuts, newline) => {
        const framer = createLineFramer({ maxLineBytes: 32, newline });
        const points = [...new Set(cuts.map((c) => c % (data.length + 1)))].sort((a, b) => a - b);
        let start = 0;
        let lines = 0;
        let faults = 0;
        for (const point of [...points, data.length]) {
          for (const item of framer.push(data.subarray(start, point))) {
            if (typeof item === 'string') lines += 1;
            else faults += 1;
          }
          expect(framer.bufferedBytes).toBeLessThanOrEqual(32);
          start = point;
        }
        // Count the terminators the way the framer's spec defines them.
        let terminators = 0;
        for (let i = 0; i < data.length; i++) {
          if (newline === 'lf' && data[i] === 0x0a) terminators += 1;
          if (newline === 'cr' && data[i] === 0x0d) terminators += 1;
        }
        // An over-long line reports its fault before its terminator and nothing at it; an
        // unterminated over-long tail reports a fault with no terminator.
        const terminator = newline === 'lf' ? 0x0a : 0x0d;
        let tail = data.subarray(data.lastIndexOf(terminator) + 1);
        if (newline === 'cr' && data.lastIndexOf(terminator) !== -1 && tail[0] === 0x0a) tail = tail.subarray(1);
        const tailFault = tail.length > 32 ? 1 : 0;
        expect(lines + faults).toBe(terminators + tailFault);
      }),
    );
  });

  it('holds a copy of a partial line, never the memory of the caller, which a read loop may reuse', () => {
    const framer = createLineFramer();
    const scratch = Buffer.alloc(16);
    const read = (text: string): Buffer => scratch.subarray(0, scratch.write(text));
    expect(framer.push(read('OPT,1,'))).toEqual([]);
    expect(framer.push(read('0.5\nXTL,2'))).toEqual(['OPT,1,0.5']);
    expect(framer.push(read(',6e6\n'))).toEqual(['XTL,2,6e6']);
  });

  // Random streams (bytes, or pieces of lines with CR, LF, multi-byte characters and runs long
  // enough to pass the 1024-byte default), both newline modes, limits at the small end, around
  // the 800-byte excerpt and the default, cut anywhere with empty chunks, each chunk handed over
  // in one Buffer the caller overwrites after every push: the same lines and faults as in one push.
  it('gives the same lines and faults for any chunking, whatever the caller does with a chunk afterwards', () => {
    const pieces = ['OPT,', 'XTL,', '0.5', ',', '6e6', '\n', '\r', '\r\n', 'é', '€', '😀', 'x'.repeat(9), 'y'.repeat(200), 'z'.repeat(700)];
    const stream = fc.oneof(
      fc.uint8Array({ maxLength: 600 }),
      fc.array(fc.oneof(fc.constantFrom(...pieces).map(bytes), fc.uint8Array({ maxLength: 4 })), { maxLength: 40 }).map((ps) => Uint8Array.from(ps.flatMap((p) => [...p]))),
    );
    const limit = fc.oneof(fc.integer({ min: 8, max: 14 }), fc.integer({ min: 801, max: 830 }), fc.constant(undefined));
    fc.assert(
      fc.property(stream, fc.array(fc.nat(), { maxLength: 30 }), limit, fc.constantFrom<'lf' | 'cr'>('lf', 'cr'), (data, cuts, maxLineBytes, newline) => {
        const options: LineFramerOptions = maxLineBytes === undefined ? { newline } : { maxLineBytes, newline };
        const whole = createLineFramer(options).push(data, 7);
        const framer = createLineFramer(options);
        const scratch = Buffer.alloc(data.length + 1);
        const points = cuts.map((c) => c % (data.length + 1)).sort((a, b) => a - b);
        const out: Array<string | Fault> = [];
        let start = 0;
        for (const point of [...points, data.length]) {
          scratch.set(data.subarray(start, point));
          out.push(...framer.push(scratch.subarray(0, point - start), 7));
          scratch.fill(0x41);
          start = point;
        }
        expect(out).toEqual(whole);
      }),
      { numRuns: 2000 },
    );
  });
});
