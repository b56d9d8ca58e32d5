// The measured-spectrum reader on any text: it returns a spectrum or refuses with one
// MeasuredSpectrumError sentence naming the file, never anything else; and any well-formed
// export (any separator, either scale, any order, repeated wavelengths) reads back to its values.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { MeasuredSpectrumError, parseMeasuredSpectrum } from '../../src/calibrate/index.ts';
import { fuzz, FUZZ_TIMEOUT_MS } from './fuzz-runs.ts';

const line = fc.oneof(
  fc.string({ maxLength: 30 }),
  fc.tuple(fc.double({ noNaN: false }), fc.constantFrom(',', ';', '\t', ' ', ', ', ';;'), fc.double()).map(([a, sep, b]) => `${a}${sep}${b}`),
  fc.constantFrom('', '#', 'nm,%T', '500', '500,', ',500', '1e400,5', '500,1e-400', '\uFEFF', '\u0000', 'NaN,NaN'),
);

describe('the measured-spectrum reader on any text', () => {
  it(
    'returns a spectrum or refuses in one sentence naming the file',
    () => {
      fuzz(
        'measured spectrum, any text',
        fc.property(fc.array(line, { maxLength: 20 }), fc.constantFrom('\n', '\r\n'), (lines, eol) => {
          try {
            const s = parseMeasuredSpectrum(lines.join(eol), 'f.csv', { quantity: 'T' });
            for (let i = 1; i < s.wavelengthsNm.length; i++) expect(s.wavelengthsNm[i] as number).toBeGreaterThan(s.wavelengthsNm[i - 1] as number);
            for (const v of s.values) expect(v >= -0.05 && v <= 1.05).toBe(true);
          } catch (error) {
            expect(error).toBeInstanceOf(MeasuredSpectrumError);
            expect((error as Error).message).toMatch(/^f\.csv/);
            expect((error as Error).message).not.toContain('\n');
          }
        }),
      );
    },
    FUZZ_TIMEOUT_MS,
  );

  it(
    'reads any well-formed export back to its values',
    () => {
      const point = fc.record({ wavelengthNm: fc.integer({ min: 190, max: 3300 }), fraction: fc.double({ min: 0, max: 1, noNaN: true }) });
      fuzz(
        'measured spectrum, well-formed exports',
        fc.property(
          fc.uniqueArray(point, { minLength: 2, maxLength: 40, selector: (p) => p.wavelengthNm }),
          fc.constantFrom(',', ';', '\t', ' '),
          fc.boolean(),
          fc.boolean(),
          fc.integer({ min: 0, max: 3 }),
          (points, sep, percent, header, repeats) => {
            const rows = points.map((p) => `${p.wavelengthNm}${sep}${(percent ? 100 * p.fraction : p.fraction).toFixed(6).replace('.', sep === ';' ? ',' : '.')}`);
            for (let i = 0; i < repeats; i++) rows.push(rows[i] as string);
            const text = `${header ? `wavelength${sep}${percent ? '%T' : 'T'}\n` : ''}${rows.join('\n')}\n`;
            const s = parseMeasuredSpectrum(text, 'f.csv', { quantity: 'T', scale: percent ? 'percent' : 'fraction' });
            const sorted = [...points].sort((a, b) => a.wavelengthNm - b.wavelengthNm);
            expect(Array.from(s.wavelengthsNm)).toEqual(sorted.map((p) => p.wavelengthNm));
            sorted.forEach((p, i) => expect(Math.abs((s.values[i] as number) - p.fraction)).toBeLessThan(1e-6));
            expect(s.duplicatedWavelengths).toBe(Math.min(repeats, points.length));
          },
        ),
      );
    },
    FUZZ_TIMEOUT_MS,
  );
});
