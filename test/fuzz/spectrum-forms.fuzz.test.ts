// The spectral monitor's forms (table and JSON, alone or sharing a port with fringe's own lines):
// any bytes never crash and give only spectra on the grid or faults; any chunking of a stream
// gives the same frames; well-formed frames read back exactly.
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { createLineDecoder, FRINGE_DIALECT } from '../../drivers/line-decoder.ts';
import { createLineFramer } from '../../drivers/line-framer.ts';
import { createSpectrumDecoder, FRINGE_SPECTRUM_JSON, FRINGE_SPECTRUM_TABLE, spectrumLineBytes, type SpectrumFormOptions } from '../../drivers/spectrum-decoder.ts';
import type { Fault, InstrumentReading } from '../../src/pipeline/types.ts';
import { fuzz, FUZZ_TIMEOUT_MS } from './fuzz-runs.ts';

const FORMS: Record<string, SpectrumFormOptions> = {
  'fringe table': FRINGE_SPECTRUM_TABLE,
  'fringe json': FRINGE_SPECTRUM_JSON,
  'untagged table, configured grid, whitespace': { form: 'table', delimiter: 'whitespace', grid: { fromNm: 400, toNm: 420, stepNm: 2 } },
  'bare json, configured grid': { form: 'json', fields: { values: 'T', time: 'ms' }, timeScale: 0.001, grid: [500, 600, 700] },
};

/** The port's pipeline without the transport: framer, then the spectrum decoder, then fringe's own dialect. */
function port(form: SpectrumFormOptions): (chunks: readonly Uint8Array[]) => (InstrumentReading | Fault)[] {
  return (chunks) => {
    const framer = createLineFramer({ maxLineBytes: spectrumLineBytes(form) });
    const spectra = createSpectrumDecoder(form);
    const scalar = createLineDecoder(FRINGE_DIALECT);
    const out: (InstrumentReading | Fault)[] = [];
    for (const chunk of chunks) {
      for (const line of framer.push(chunk, 0)) {
        if (typeof line !== 'string') {
          out.push(line);
          continue;
        }
        const frame = spectra.decode(line, 0);
        const item = frame === undefined ? scalar(line, 0) : frame;
        if (item !== null) out.push(item);
      }
    }
    return out;
  };
}

/** Every spectrum lies on its grid with finite values in range; every fault points inside its line. */
function checkOutputs(items: readonly (InstrumentReading | Fault)[]): void {
  for (const item of items) {
    if (item.kind === 'spectrum') {
      expect(item.values.length).toBe(item.wavelengthsNm.length);
      for (const v of item.values) expect(Number.isFinite(v) && v >= -0.5 && v <= 1.5).toBe(true);
      for (let i = 1; i < item.wavelengthsNm.length; i++) expect(item.wavelengthsNm[i] as number).toBeGreaterThan(item.wavelengthsNm[i - 1] as number);
    } else if (item.kind === 'fault') {
      expect(item.line.length).toBeLessThanOrEqual(200);
      expect(item.offset).toBeGreaterThanOrEqual(0);
    }
  }
}

const cutsOf = (data: Uint8Array, cuts: readonly number[]): Uint8Array[] => {
  const points = [...new Set(cuts.map((c) => c % (data.length + 1)))].sort((a, b) => a - b);
  const out: Uint8Array[] = [];
  let from = 0;
  for (const p of [...points, data.length]) {
    out.push(data.slice(from, p));
    from = p;
  }
  return out;
};

/** A value an instrument may send: any double in range, written as its shortest exact text. */
const value = fc.double({ min: -0.5, max: 1.5, noNaN: true }).map((v) => (Object.is(v, -0) ? 0 : v));
const grid = fc
  .uniqueArray(fc.integer({ min: 1, max: 200_000 }), { minLength: 2, maxLength: 40 })
  .map((nm) => nm.sort((a, b) => a - b).map((n) => n / 100));

/** A well-formed stream of a form: its header (when it has one), spectra, and fringe's own lines between. */
function stream(name: string): fc.Arbitrary<{ text: string; spectra: { t: number; values: number[] }[] }> {
  const form = FORMS[name] as SpectrumFormOptions;
  const fixed = form.grid === undefined ? undefined : Array.isArray(form.grid) ? form.grid : [400, 402, 404, 406, 408, 410, 412, 414, 416, 418, 420];
  const gridArb = fixed ? fc.constant(fixed) : grid;
  return gridArb.chain((nm) =>
    fc.array(fc.tuple(fc.integer({ min: 0, max: 10_000_000 }), fc.array(value, { minLength: nm.length, maxLength: nm.length }), fc.boolean()), { maxLength: 8 }).map((rows) => {
      const lines: string[] = [];
      if (!fixed) lines.push(form.form === 'table' ? `SPW,${nm.join(',')}` : JSON.stringify({ ch: 'spectral', nm }));
      // The bare form's instrument sends milliseconds, scaled by timeScale 0.001.
      const spectra = rows.map(([ms, values]) => ({ t: form.form === 'json' && form.timeScale !== undefined ? ms * 0.001 : ms / 1000, values }));
      const shared = name.startsWith('fringe');
      rows.forEach(([ms, values, scalarLine], i) => {
        if (shared && scalarLine) lines.push(`OPT,${(ms / 1000).toFixed(3)},0.500000`);
        const t = (spectra[i] as { t: number }).t;
        if (name === 'fringe table') lines.push(`SPC,${t},${values.join(',')}`);
        else if (name === 'fringe json') lines.push(JSON.stringify({ ch: 'spectral', t, v: values }));
        else if (form.form === 'table') lines.push(values.join(' \t '));
        else lines.push(JSON.stringify({ ms, T: values }));
      });
      return { text: lines.map((l) => `${l}\n`).join(''), spectra };
    }),
  );
}

describe('the spectral forms', () => {
  for (const name of Object.keys(FORMS)) {
    const form = FORMS[name] as SpectrumFormOptions;
    const read = port(form);

    it(`${name}: any bytes never crash and give only spectra on the grid or faults`, () => {
      const junk = fc.oneof(
        fc.uint8Array({ maxLength: 4000 }),
        fc.array(fc.oneof(fc.constantFrom('SPW', 'SPC', '{"ch":"spectral"', '"nm":[', '"v":[', ',', '\n', '\r\n', '1e999', 'NaN', '-0', '400', '0.5', ']', '}', ' '), fc.string()), { maxLength: 300 }).map((parts) => new TextEncoder().encode(parts.join(''))),
      );
      fuzz(`spectral form ${name}, any bytes`, fc.property(junk, fc.array(fc.nat(), { maxLength: 6 }), (data, cuts) => checkOutputs(read(cutsOf(data, cuts)))));
    }, FUZZ_TIMEOUT_MS);

    it(`${name}: any chunking of a stream gives the same frames`, () => {
      fuzz(
        `spectral form ${name}, chunking`,
        fc.property(stream(name), fc.array(fc.nat(), { maxLength: 12 }), ({ text }, cuts) => {
          const data = new TextEncoder().encode(text);
          expect(read(cutsOf(data, cuts))).toEqual(read([data]));
        }),
      );
    }, FUZZ_TIMEOUT_MS);

    it(`${name}: well-formed frames read back exactly`, () => {
      fuzz(
        `spectral form ${name}, round trip`,
        fc.property(stream(name), ({ text, spectra }) => {
          const got = read([new TextEncoder().encode(text)]).filter((x) => x.kind !== 'reading');
          expect(got.map((x) => x.kind)).toEqual(spectra.map(() => 'spectrum'));
          got.forEach((s, i) => {
            const sent = spectra[i] as { t: number; values: number[] };
            if (s.kind !== 'spectrum') return;
            expect(Array.from(s.values)).toEqual(sent.values);
            if (name !== 'untagged table, configured grid, whitespace') expect(s.timeS).toBe(sent.t);
          });
        }),
      );
    }, FUZZ_TIMEOUT_MS);
  }
});
