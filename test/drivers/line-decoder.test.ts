// The configurable line decoder: fringe's own format (the default dialect), the three dialects,
// scale/offset/range and time units, faults with their offsets, and refused options.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { createLineDecoder, FRINGE_DIALECT, type LineDecoderOptions } from '../../drivers/line-decoder.ts';
import { ConfigError } from '../../src/config/validation.ts';
import type { Fault, Reading } from '../../src/pipeline/types.ts';

const fringe = createLineDecoder(FRINGE_DIALECT);

describe("fringe's own line format (the default dialect)", () => {
  it('reads optical and crystal lines with the instrument time and the arrival time', () => {
    expect(fringe('OPT,12.5,0.4321', 100.25)).toEqual({ kind: 'reading', channel: 'optical', value: 0.4321, timeS: 12.5, arrivalS: 100.25 });
    expect(fringe('XTL,12.6,5987654.25', 100.3)).toEqual({ kind: 'reading', channel: 'crystal', value: 5987654.25, timeS: 12.6, arrivalS: 100.3 });
    expect(fringe('XTL , 1e1 , 6.0e6', 1)).toMatchObject({ channel: 'crystal', value: 6e6, timeS: 10 });
  });

  it('ignores blank lines and shutter acknowledgements', () => {
    expect(fringe('', 1)).toBeNull();
    expect(fringe('   \t', 1)).toBeNull();
    expect(fringe('ACK SiO2 CLOSE 12.7', 1)).toBeNull();
  });

  it('turns bad lines into faults with the offset of the problem', () => {
    const f = (line: string): Fault => fringe(line, 3) as Fault;
    expect(f('OPT,12.5')).toMatchObject({ kind: 'fault', code: 'garbled', channel: 'unknown', offset: 8, arrivalS: 3 });
    expect(f('LAMP,12.5,0.5')).toMatchObject({ code: 'unknown-channel', channel: 'unknown', offset: 0 });
    expect(f('OPT,soon,0.5')).toMatchObject({ code: 'not-a-number', channel: 'optical', offset: 4 });
    expect(f('OPT,12.5,0.5x')).toMatchObject({ code: 'not-a-number', channel: 'optical', offset: 9 });
    expect(f('OPT,12.5,NaN')).toMatchObject({ code: 'not-a-number', offset: 9 });
    expect(f('OPT,12.5,1e999')).toMatchObject({ code: 'not-a-number', offset: 9 });
    expect(f('OPT,12.5,0x10')).toMatchObject({ code: 'not-a-number', offset: 9 });
    expect(f('OPT,12.5,1.7')).toMatchObject({ code: 'out-of-range', channel: 'optical', offset: 9 });
    expect(f('XTL,12.5,120')).toMatchObject({ code: 'out-of-range', channel: 'crystal', offset: 9 });
    expect(f('opt,12.5,0.5')).toMatchObject({ code: 'unknown-channel' });
  });

  it('keeps the offending line, truncated to 200 characters', () => {
    const line = `OPT,1,${'9'.repeat(300)}x`;
    const fault = fringe(line, 0) as Fault;
    expect(fault.code).toBe('not-a-number');
    expect(fault.line).toBe(line.slice(0, 200));
  });

  it('cannot be changed through the exported constant', () => {
    expect(Object.isFrozen(FRINGE_DIALECT)).toBe(true);
    expect(() => {
      (FRINGE_DIALECT as { delimiter: string }).delimiter = ';';
    }).toThrow(TypeError);
  });
});

describe('delimited dialect', () => {
  it('reads a fixed-channel instrument in percent with millisecond times', () => {
    const decode = createLineDecoder({
      format: 'delimited',
      delimiter: ';',
      columns: { time: 0, value: 2 },
      channel: 'optical',
      timeScale: 0.001,
      channels: { optical: { scale: 0.01, range: [-0.1, 1.1] } },
    });
    const reading = decode('1500;T;43.21;ok', 9) as Reading;
    expect(reading.channel).toBe('optical');
    expect(reading.timeS).toBeCloseTo(1.5, 12);
    expect(reading.value).toBeCloseTo(0.4321, 12);
    expect(decode('1500;T;120', 9)).toMatchObject({ code: 'out-of-range', offset: 7 });
  });

  it('uses the arrival time when the line carries none, and splits on runs of whitespace', () => {
    const decode = createLineDecoder({ format: 'delimited', delimiter: 'whitespace', columns: { channel: 0, value: 1 }, channelTags: { F: 'crystal' } });
    expect(decode('  F \t 5999000.5', 42.5)).toEqual({ kind: 'reading', channel: 'crystal', value: 5999000.5, timeS: 42.5, arrivalS: 42.5 });
    expect(decode('F   x', 1)).toMatchObject({ code: 'not-a-number', offset: 4 });
  });

  it('accepts channel names as tags when no tag map is given', () => {
    const decode = createLineDecoder({ format: 'delimited', columns: { channel: 1, value: 0 } });
    expect(decode('0.5,optical', 0)).toMatchObject({ channel: 'optical', value: 0.5 });
    expect(decode('0.5,OPT', 0)).toMatchObject({ code: 'unknown-channel', offset: 4 });
  });

  it('applies an offset after the scale (a zero correction in Hz)', () => {
    const decode = createLineDecoder({ format: 'delimited', columns: { value: 0 }, channel: 'crystal', channels: { crystal: { scale: 1000, offset: -125 } } });
    expect((decode('5987.5', 0) as Reading).value).toBe(5987.5 * 1000 - 125);
  });

  it('skips lines matching an ignore pattern', () => {
    const decode = createLineDecoder({ format: 'delimited', columns: { value: 1 }, channel: 'optical', ignore: ['^#', '^time,'] });
    expect(decode('# monitor v2', 0)).toBeNull();
    expect(decode('time,value', 0)).toBeNull();
    expect(decode('1,0.25', 0)).toMatchObject({ value: 0.25 });
  });
});

describe('regex dialect', () => {
  const decode = createLineDecoder({
    format: 'regex',
    pattern: '^(?<channel>[TR])\\s+t=(?<time>\\S+)\\s+v=(?<value>\\S+)%$',
    channelTags: { T: 'optical', R: 'optical' },
    channels: { optical: { scale: 0.01 } },
  });

  it('reads the named groups', () => {
    const reading = decode('T t=3.25 v=41.5%', 8) as Reading;
    expect(reading).toMatchObject({ kind: 'reading', channel: 'optical', timeS: 3.25, arrivalS: 8 });
    expect(reading.value).toBeCloseTo(0.415, 12);
  });

  it('reports a line that does not match as garbled, and a bad group at its position', () => {
    expect(decode('hello', 0)).toMatchObject({ code: 'garbled', offset: 0 });
    expect(decode('T t=3.25 v=4x%', 0)).toMatchObject({ code: 'not-a-number', offset: 11 });
    expect(decode('T t=later v=4%', 0)).toMatchObject({ code: 'not-a-number', offset: 4 });
  });

  it('takes flags', () => {
    const loose = createLineDecoder({ format: 'regex', pattern: '^freq (?<value>\\S+)$', flags: 'i', channel: 'crystal' });
    expect(loose('FREQ 6000000', 0)).toMatchObject({ channel: 'crystal', value: 6e6 });
  });
});

describe('json dialect', () => {
  const decode = createLineDecoder({ format: 'json', fields: { channel: 'ch', time: 'meta.t', value: 'v' }, channelTags: { opt: 'optical', xtl: 'crystal' } });

  it('reads fields, nested paths and numeric strings', () => {
    expect(decode('{"ch":"xtl","meta":{"t":4.5},"v":5990000}', 5)).toEqual({ kind: 'reading', channel: 'crystal', value: 5990000, timeS: 4.5, arrivalS: 5 });
    expect(decode('{"ch":"opt","meta":{"t":"4.6"},"v":"0.5"}', 5)).toMatchObject({ channel: 'optical', value: 0.5, timeS: 4.6 });
  });

  it('faults bad JSON, missing fields and non-numbers', () => {
    expect(decode('{"ch":"opt",', 0)).toMatchObject({ code: 'garbled' });
    expect(decode('[1,2]', 0)).toMatchObject({ code: 'garbled', offset: 0 });
    expect(decode('{"ch":"opt","meta":{},"v":0.5}', 0)).toMatchObject({ code: 'garbled' });
    expect(decode('{"ch":"opt","meta":{"t":1},"v":true}', 0)).toMatchObject({ code: 'not-a-number', channel: 'optical', offset: 27 });
    expect(decode('{"ch":"uv","meta":{"t":1},"v":1}', 0)).toMatchObject({ code: 'unknown-channel', offset: 1 });
    expect(decode('{"ch":"opt","meta":{"t":1},"v":1,"__proto__":{"v":2}}', 0)).toMatchObject({ value: 1 });
  });
});

describe('decoder options', () => {
  const refuse = (options: unknown, path: RegExp): void => {
    let caught: unknown;
    try {
      createLineDecoder(options as LineDecoderOptions);
    } catch (error) {
      caught = error;
    }
    expect(caught).toBeInstanceOf(ConfigError);
    expect((caught as ConfigError).violations.map((v) => v.at).join(' | ')).toMatch(path);
  };

  it('names the bad option', () => {
    refuse({ format: 'delimited', columns: { channel: 0 } }, /^columns\.value$/);
    refuse({ format: 'delimited', colums: { value: 0 }, channel: 'optical' }, /^(columns \| )?$|columns/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', delimter: ';' }, /^$/);
    refuse({ format: 'csv', columns: { value: 0 } }, /^format$/);
    refuse({ format: 'delimited', columns: { value: 1 } }, /^channel$/);
    refuse({ format: 'delimited', columns: { channel: 0, value: 1 }, channel: 'optical' }, /^channel$/);
    refuse({ format: 'delimited', columns: { channel: 0, value: 0 } }, /^columns\.value$/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', channelTags: { O: 'optical' } }, /^channelTags$/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', channels: { optical: { range: [1, 0] } } }, /^channels\.optical\.range$/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', channels: { optical: { scale: 0 } } }, /^channels\.optical\.scale$/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', channels: { uv: {} } }, /^channels$/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', ignore: ['ok', '(unclosed'] }, /^ignore\[1\]$/);
    refuse({ format: 'delimited', columns: { value: 0 }, channel: 'optical', timeScale: 0 }, /^timeScale$/);
    refuse({ format: 'regex', pattern: '^(?<v>\\d+)$', channel: 'optical' }, /^pattern$/);
    refuse({ format: 'regex', pattern: '^(?<value>\\d+', channel: 'optical' }, /^pattern$/);
    refuse({ format: 'regex', pattern: '^(?<value>\\d+)$', channel: 'optical', flags: 'g' }, /^flags$/);
    refuse({ format: 'json', fields: { time: 't' }, channel: 'crystal' }, /^fields\.value$/);
  });

  it('says what the unknown key is', () => {
    expect(() => createLineDecoder({ format: 'delimited', columns: { value: 0 }, channel: 'optical', delimter: ';' } as unknown as LineDecoderOptions)).toThrow(/delimter/);
  });
});

describe('decoder properties', () => {
  const tagOf = { optical: 'OPT', crystal: 'XTL' } as const;
  // Plain doubles; -0 is written "0" by JSON, so it is left out.
  const number = fc.double({ noNaN: true, noDefaultInfinity: true, min: -1e12, max: 1e12 }).map((v) => (Object.is(v, -0) ? 0 : v));
  const sample = fc.record({ channel: fc.constantFrom<'optical' | 'crystal'>('optical', 'crystal'), timeS: number, value: number });

  const delimited = createLineDecoder({ format: 'delimited', columns: { channel: 0, time: 1, value: 2 }, channelTags: { OPT: 'optical', XTL: 'crystal' } });
  const regex = createLineDecoder({ format: 'regex', pattern: '^(?<channel>\\w+) @(?<time>\\S+): (?<value>\\S+)$', channelTags: { OPT: 'optical', XTL: 'crystal' } });
  const json = createLineDecoder({ format: 'json', fields: { channel: 'c', time: 't', value: 'v' }, channelTags: { OPT: 'optical', XTL: 'crystal' } });

  it('reads the same reading from all three dialects', () => {
    fc.assert(
      fc.property(sample, fc.double({ noNaN: true, noDefaultInfinity: true }), (s, arrivalS) => {
        const tag = tagOf[s.channel];
        const expected: Reading = { kind: 'reading', channel: s.channel, value: s.value, timeS: s.timeS, arrivalS };
        expect(delimited(`${tag},${s.timeS},${s.value}`, arrivalS)).toEqual(expected);
        expect(regex(`${tag} @${s.timeS}: ${s.value}`, arrivalS)).toEqual(expected);
        expect(json(JSON.stringify({ c: tag, t: s.timeS, v: s.value }), arrivalS)).toEqual(expected);
      }),
    );
  });

  it('never throws on garbage, and returns a reading only for a well-formed line', () => {
    const wellFormed = /^(OPT|XTL),[^,]*,[^,]*(,.*)?$/;
    const junk = fc.oneof(
      fc.string({ maxLength: 60 }),
      fc.string({ unit: fc.constantFrom('O', 'P', 'T', 'X', 'L', ',', '1', '.', 'e', '-', '+', ' ', 'N', 'a', '{', '"', ':', '}'), maxLength: 30 }),
    );
    fc.assert(
      fc.property(junk, (line) => {
        for (const decode of [fringe, delimited, regex, json]) {
          const out = decode(line, 1);
          if (out === null) expect(line.trim()).toBe('');
          else if (out.kind === 'fault') {
            expect(out.offset).toBeGreaterThanOrEqual(0);
            expect(out.offset).toBeLessThanOrEqual(line.length);
            expect(out.line).toBe(line.slice(0, 200));
          } else {
            expect(Number.isFinite(out.value)).toBe(true);
            expect(Number.isFinite(out.timeS)).toBe(true);
          }
        }
        const out = fringe(line, 1);
        if (out?.kind === 'reading') expect(line.trim()).toMatch(wellFormed);
      }),
    );
  });

  it('turns a letter inside the value into not-a-number at the value field', () => {
    fc.assert(
      fc.property(sample, fc.nat(), fc.constantFrom('x', 'O', '#', ';'), (s, at, letter) => {
        const head = `${tagOf[s.channel]},${s.timeS},`;
        const text = String(s.value);
        const cut = at % (text.length + 1);
        const out = delimited(`${head}${text.slice(0, cut)}${letter}${text.slice(cut)}`, 0);
        expect(out).toMatchObject({ kind: 'fault', code: 'not-a-number', channel: s.channel, offset: head.length });
      }),
    );
  });

  it('scales, offsets and range-checks the value: inside the range a reading, outside a fault', () => {
    fc.assert(
      fc.property(
        fc.double({ min: -1e3, max: 1e3, noNaN: true }),
        fc.double({ min: 1e-3, max: 1e3, noNaN: true }),
        fc.double({ min: -1e3, max: 1e3, noNaN: true }),
        fc.double({ min: -1e6, max: 1e6, noNaN: true }),
        fc.double({ min: 1e-6, max: 1e6, noNaN: true }),
        (raw, scale, offset, min, width) => {
          const max = min + width;
          if (!(max > min)) return;
          const decode = createLineDecoder({ format: 'delimited', columns: { value: 0 }, channel: 'optical', channels: { optical: { scale, offset, range: [min, max] } } });
          const value = raw * scale + offset;
          const out = decode(String(raw), 0);
          if (value >= min && value <= max) expect(out).toMatchObject({ kind: 'reading', value });
          else expect(out).toMatchObject({ kind: 'fault', code: 'out-of-range', channel: 'optical', offset: 0 });
        },
      ),
    );
  });

  it('never makes a non-finite reading: a value or time scaled past the largest double is a fault', () => {
    const scaled = createLineDecoder({
      format: 'delimited',
      columns: { channel: 0, time: 1, value: 2 },
      channelTags: { OPT: 'optical', XTL: 'crystal' },
      timeScale: 1000,
      channels: { crystal: { scale: 1e10 } },
    });
    expect(scaled('XTL,1.5,1e308', 0)).toMatchObject({ kind: 'fault', code: 'out-of-range', channel: 'crystal', offset: 8 });
    expect(scaled(`XTL,1.5,${'9'.repeat(300)}`, 0)).toMatchObject({ kind: 'fault', code: 'out-of-range' });
    expect(scaled('OPT,1e307,0.5', 0)).toMatchObject({ kind: 'fault', code: 'out-of-range', channel: 'optical', offset: 4 });
    expect(scaled('XTL,1.5,5.9e-4', 0)).toMatchObject({ kind: 'reading', value: 5.9e6, timeS: 1500 });
    // Any number a line can hold, any finite scale: a reading is finite or it is a fault.
    fc.assert(
      fc.property(fc.double({ noNaN: true, noDefaultInfinity: true }), fc.double({ noNaN: true, noDefaultInfinity: true, min: 1e-300 }), (raw, scale) => {
        const decode = createLineDecoder({ format: 'delimited', columns: { value: 0 }, channel: 'crystal', channels: { crystal: { scale } } });
        const out = decode(String(raw), 0);
        if (out?.kind === 'reading') expect(Number.isFinite(out.value)).toBe(true);
        else expect(out).toMatchObject({ kind: 'fault' });
      }),
    );
  });

  it('includes both ends of the range', () => {
    const decode = createLineDecoder({ format: 'delimited', columns: { value: 0 }, channel: 'optical', channels: { optical: { range: [0, 1] } } });
    expect(decode('0', 0)).toMatchObject({ kind: 'reading', value: 0 });
    expect(decode('1', 0)).toMatchObject({ kind: 'reading', value: 1 });
    expect(decode('1.0000001', 0)).toMatchObject({ kind: 'fault', code: 'out-of-range' });
  });
});
