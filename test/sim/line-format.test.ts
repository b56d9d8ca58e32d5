// fringe's line format: the documented examples, round trips (property tests), and every way
// a line is refused, with the fault's code and character offset.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import type { Fault, Reading, ShutterAck, ShutterCommand } from '../../src/pipeline/types.ts';
import { formatAck, formatReading, formatShutterCommand, MAX_LINE_CHARS, parseAck, parseReadingLine, parseShutterCommand } from '../../sim/index.ts';

const reading = (channel: 'optical' | 'crystal', timeS: number, value: number): Reading => ({ kind: 'reading', channel, value, timeS, arrivalS: timeS });
const sourceName = fc.stringMatching(/^[!-~]{1,20}$/);

describe('formatting', () => {
  it('writes the documented examples', () => {
    expect(formatReading(reading('optical', 12.3, 0.912345))).toBe('OPT,12.300,0.912345\n');
    expect(formatReading(reading('crystal', 12.3, 5987654.321))).toBe('XTL,12.300,5987654.321\n');
    expect(formatShutterCommand({ kind: 'shutter', action: 'close', source: 'TiO2', layer: 3, timeS: 12.4 })).toBe('SHUTTER TiO2 CLOSE 3\n');
    expect(formatAck({ kind: 'shutter-ack', action: 'close', source: 'TiO2', timeS: 12.517 })).toBe('ACK TiO2 CLOSE 12.517\n');
  });

  it('never writes a negative zero, and refuses non-finite values', () => {
    expect(formatReading(reading('optical', 0, -1e-9))).toBe('OPT,0.000,0.000000\n');
    expect(formatReading(reading('optical', 0, -0.0000004))).toBe('OPT,0.000,0.000000\n');
    expect(formatReading(reading('optical', 0, -0.0000006))).toBe('OPT,0.000,-0.000001\n');
    expect(() => formatReading(reading('optical', 0, Number.NaN))).toThrow(RangeError);
  });
});

describe('round trips', () => {
  it('readings: parse(format(r)) is r to the written decimals, and formatting again gives the same line', () => {
    fc.assert(
      fc.property(
        fc.constantFrom<'optical' | 'crystal'>('optical', 'crystal'),
        fc.double({ min: 0, max: 1e6, noNaN: true }),
        fc.double({ min: -1, max: 2, noNaN: true }),
        fc.double({ min: 1e6, max: 1e7, noNaN: true }),
        (channel, timeS, optical, crystal) => {
          const value = channel === 'optical' ? optical : crystal;
          const line = formatReading(reading(channel, timeS, value));
          expect(line.endsWith('\n')).toBe(true);
          const back = parseReadingLine(line, 99);
          if (back.kind !== 'reading') throw new Error(`refused ${line}: ${back.code}`);
          expect(back.channel).toBe(channel);
          expect(back.arrivalS).toBe(99);
          expect(Math.abs(back.timeS - timeS)).toBeLessThanOrEqual(0.0005 + 1e-9 * timeS);
          expect(Math.abs(back.value - value)).toBeLessThanOrEqual((channel === 'optical' ? 5e-7 : 5e-4) + 1e-15 * Math.abs(value));
          expect(formatReading(back)).toBe(line);
        },
      ),
    );
  });

  it('shutter commands come back exactly', () => {
    fc.assert(
      fc.property(sourceName, fc.constantFrom<'open' | 'close'>('open', 'close'), fc.integer({ min: 1, max: 100_000 }), fc.double({ min: 0, max: 1e6, noNaN: true }), (source, action, layer, timeS) => {
        const command: ShutterCommand = { kind: 'shutter', action, source, layer, timeS };
        expect(parseShutterCommand(formatShutterCommand(command), timeS)).toEqual(command);
      }),
    );
  });

  it('acknowledgements come back to the millisecond', () => {
    fc.assert(
      fc.property(sourceName, fc.constantFrom<'open' | 'close'>('open', 'close'), fc.double({ min: 0, max: 1e6, noNaN: true }), (source, action, timeS) => {
        const ack: ShutterAck = { kind: 'shutter-ack', action, source, timeS };
        const line = formatAck(ack);
        const back = parseAck(line, 5);
        if (back.kind !== 'shutter-ack') throw new Error(`refused ${line}`);
        expect({ ...back, timeS: 0 }).toEqual({ ...ack, timeS: 0 });
        expect(Math.abs(back.timeS - timeS)).toBeLessThanOrEqual(0.0005 + 1e-9 * timeS);
        expect(formatAck(back)).toBe(line);
      }),
    );
  });

  it('accepts CRLF and a missing line end', () => {
    expect(parseReadingLine('OPT,1.000,0.500000\r\n', 1)).toMatchObject({ kind: 'reading', value: 0.5, timeS: 1 });
    expect(parseShutterCommand('SHUTTER SiO2 OPEN 2', 3)).toEqual({ kind: 'shutter', action: 'open', source: 'SiO2', layer: 2, timeS: 3 });
  });
});

describe('refusals', () => {
  const faultOf = (result: unknown): Pick<Fault, 'code' | 'offset' | 'channel'> => {
    const f = result as Fault;
    expect(f.kind).toBe('fault');
    return { code: f.code, offset: f.offset, channel: f.channel };
  };

  it('bad reading lines', () => {
    expect(faultOf(parseReadingLine('TMP,1.000,2\n', 0))).toEqual({ code: 'unknown-channel', offset: 0, channel: 'unknown' });
    expect(faultOf(parseReadingLine('OPT,1.000\n', 0))).toEqual({ code: 'garbled', offset: 9, channel: 'optical' });
    expect(faultOf(parseReadingLine('OPT,1.000,0.5,7\n', 0))).toEqual({ code: 'garbled', offset: 13, channel: 'optical' });
    expect(faultOf(parseReadingLine('OPT,1.0x0,0.5\n', 0))).toEqual({ code: 'not-a-number', offset: 4, channel: 'optical' });
    expect(faultOf(parseReadingLine('XTL,1.000,\n', 0))).toEqual({ code: 'not-a-number', offset: 10, channel: 'crystal' });
    expect(faultOf(parseReadingLine('XTL,1.000,1e6\n', 0))).toEqual({ code: 'not-a-number', offset: 10, channel: 'crystal' });
    expect(faultOf(parseReadingLine('OPT,-1.000,0.5\n', 0))).toEqual({ code: 'out-of-range', offset: 4, channel: 'optical' });
    expect(faultOf(parseReadingLine('XTL,1.000,0.000\n', 0))).toEqual({ code: 'out-of-range', offset: 10, channel: 'crystal' });
    expect(faultOf(parseReadingLine(`OPT,1.000,${'1'.repeat(MAX_LINE_CHARS)}\n`, 0))).toEqual({ code: 'line-too-long', offset: MAX_LINE_CHARS, channel: 'unknown' });
  });

  it('bad shutter and acknowledgement lines', () => {
    expect(faultOf(parseShutterCommand('SHUTER TiO2 OPEN 1', 0))).toMatchObject({ code: 'garbled', offset: 0 });
    expect(faultOf(parseShutterCommand('SHUTTER TiO2 SHUT 1', 0))).toMatchObject({ code: 'garbled', offset: 13 });
    expect(faultOf(parseShutterCommand('SHUTTER TiO2 open 1', 0))).toMatchObject({ code: 'garbled', offset: 13 });
    expect(faultOf(parseShutterCommand('SHUTTER  TiO2 OPEN 1', 0))).toMatchObject({ code: 'garbled' });
    expect(faultOf(parseShutterCommand('SHUTTER TiO2 OPEN', 0))).toMatchObject({ code: 'garbled', offset: 17 });
    expect(faultOf(parseShutterCommand('SHUTTER TiO2 OPEN x', 0))).toMatchObject({ code: 'not-a-number', offset: 18 });
    expect(faultOf(parseShutterCommand('SHUTTER TiO2 OPEN 1.5', 0))).toMatchObject({ code: 'not-a-number', offset: 18 });
    expect(faultOf(parseShutterCommand('SHUTTER TiO2 OPEN 0', 0))).toMatchObject({ code: 'out-of-range', offset: 18 });
    expect(faultOf(parseAck('ACK TiO2 CLOSE -2.000', 0))).toMatchObject({ code: 'out-of-range', offset: 15 });
    expect(faultOf(parseAck('ACK TiO2 CLOSE soon', 0))).toMatchObject({ code: 'not-a-number', offset: 15 });
    expect(faultOf(parseAck('SHUTTER TiO2 CLOSE 1', 0))).toMatchObject({ code: 'garbled', offset: 0 });
  });

  it('never throws on any line', () => {
    fc.assert(
      fc.property(fc.string({ maxLength: 300 }), (line) => {
        for (const result of [parseReadingLine(line, 0), parseShutterCommand(line, 0), parseAck(line, 0)]) {
          expect(['reading', 'shutter', 'shutter-ack', 'fault']).toContain(result.kind);
          if (result.kind === 'fault') expect(result.line.length).toBeLessThanOrEqual(200);
        }
      }),
    );
  });
});
