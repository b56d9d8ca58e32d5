// The measured-spectrum reader against files as spectrophotometers export them, and against
// what they must refuse: each refusal one sentence naming the file and the line.
import { mkdtempSync, writeFileSync, mkdirSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { formatMeasuredSpectrum, MeasuredSpectrumError, parseMeasuredSpectrum, readMeasuredSpectrum } from '../../src/calibrate/index.ts';

const T = { quantity: 'T' as const };
const parse = (text: string, options: Parameters<typeof parseMeasuredSpectrum>[2] = T) => parseMeasuredSpectrum(text, 'part.csv', options);
const refusal = (text: string, options: Parameters<typeof parseMeasuredSpectrum>[2] = T): string => {
  try {
    parse(text, options);
  } catch (error) {
    expect(error).toBeInstanceOf(MeasuredSpectrumError);
    const message = (error as Error).message;
    expect(message.split('\n')).toHaveLength(1);
    expect(message).toContain('part.csv');
    return message;
  }
  throw new Error('expected a refusal');
};

describe('the measured-spectrum reader', () => {
  it('reads a header line, commas and percent, and says it read percent because of the values', () => {
    const s = parse('Wavelength (nm),Transmittance\n400,91.5\n401,91.7\n402,92.0\n');
    expect(s.scale).toBe('percent');
    expect(s.scaleReason).toBe('values above 1.05');
    expect(Array.from(s.wavelengthsNm)).toEqual([400, 401, 402]);
    expect(s.values[0]).toBeCloseTo(0.915, 12);
    expect(s.header).toEqual(['Wavelength (nm),Transmittance']);
  });

  it('reads fractions without a header, tabs, CR LF and a byte-order mark', () => {
    const s = parse('\uFEFF500\t0.12\r\n501\t0.13\r\n502\t0.125\r\n');
    expect(s.scale).toBe('fraction');
    expect(Array.from(s.values)).toEqual([0.12, 0.13, 0.125]);
  });

  it('takes percent from a header that shows % even when every value is below 1 (a low-reflectance part)', () => {
    const s = parse('nm;%R\n450;0,42\n451;0,40\n452;0,39\n', { quantity: 'R' });
    expect(s.scale).toBe('percent');
    expect(s.scaleReason).toBe('header');
    expect(s.values[0]).toBeCloseTo(0.0042, 12); // "0,42" with a semicolon: a decimal comma
  });

  it('reads whitespace columns and sorts decreasing wavelengths', () => {
    const s = parse('800   50.0\n799   49.0\n798   48.0\n');
    expect(Array.from(s.wavelengthsNm)).toEqual([798, 799, 800]);
    expect(s.values[0]).toBeCloseTo(0.48, 12);
  });

  it('averages a wavelength given twice and counts both readings', () => {
    const s = parse('wl,T\n860,40\n861,41\n860,42\n');
    expect(Array.from(s.wavelengthsNm)).toEqual([860, 861]);
    expect(s.values[0]).toBeCloseTo(0.41, 12);
    expect(Array.from(s.counts)).toEqual([2, 1]);
    expect(s.duplicatedWavelengths).toBe(1);
  });

  it('follows --scale when it is given', () => {
    const s = parse('500,0.5\n501,0.6\n', { quantity: 'T', scale: 'percent' });
    expect(s.scaleReason).toBe('given');
    expect(s.values[0]).toBeCloseTo(0.005, 12);
  });

  it('skips comment and blank lines anywhere, and a trailing separator', () => {
    const s = parse('# instrument X\n\n500,10,\n# overlap\n\n501,11,\n');
    expect(s.values.length).toBe(2);
  });

  it('refuses a stray text line inside the data, naming its line', () => {
    expect(refusal('nm,T\n500,10\n501,11\nEnd of scan\n502,12\n')).toMatch(/line 4: expected a wavelength in nm and a T value, found "End of scan"/);
  });

  it('refuses three columns, one column, a negative wavelength, a value beyond 0–100 % and a NaN', () => {
    expect(refusal('500,10,3\n501,11,3\n')).toMatch(/line 1: expected two columns .* found 3/);
    expect(refusal('500,10\n501\n')).toMatch(/line 2: expected two columns .* found 1/);
    expect(refusal('500,10\n-501,11\n')).toMatch(/line 2: the wavelength -501 is not a positive number/);
    expect(refusal('500,10\n501,180\n')).toMatch(/line 2: T = 180 % lies outside 0–100 %/);
    expect(refusal('500,10\n501,NaN\n')).toMatch(/line 2: expected a wavelength/);
  });

  it('refuses a file with no data, one wavelength only, too many header lines, or binary junk', () => {
    expect(refusal('')).toMatch(/holds no wavelength and value pair/);
    expect(refusal('a\nb\n')).toMatch(/holds no wavelength and value pair/);
    expect(refusal('500,10\n500,11\n')).toMatch(/one wavelength only/);
    expect(refusal(`${'header\n'.repeat(11)}500,1\n`)).toMatch(/line 11: still no wavelength and value after 10 header lines/);
    expect(refusal('500,10\n\u0001\u0002\n')).toMatch(/line 2 holds control characters/);
  });

  it('reads back what simulate --measured-out writes, to its rounding', () => {
    const wl = [450, 451, 452];
    const values = [0.01234, 0.5, 0.99876];
    const s = parse(formatMeasuredSpectrum('T', wl, values, 'a note\nover two lines'));
    expect(s.scale).toBe('percent');
    s.values.forEach((v, i) => expect(v).toBeCloseTo(values[i] as number, 5));
  });

  it('refuses a folder, a missing file and an oversized one in one sentence naming it', () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-measured-'));
    const folder = join(dir, 'folder.csv');
    mkdirSync(folder);
    expect(() => readMeasuredSpectrum(folder, T)).toThrow(/folder\.csv is not a regular file/);
    expect(() => readMeasuredSpectrum(join(dir, 'missing.csv'), T)).toThrow(/missing\.csv cannot be read/);
    const big = join(dir, 'big.csv');
    writeFileSync(big, Buffer.alloc(8 * 1024 * 1024 + 1, 0x31));
    expect(() => readMeasuredSpectrum(big, T)).toThrow(/big\.csv is 8388609 bytes/);
  });
});
