// Spectra in the journal: a grid once, then each spectrum compactly, read back and replayed as written.
import { mkdtempSync, readFileSync, statSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import fc from 'fast-check';
import { firstValueFrom, toArray, VirtualTimeScheduler } from 'rxjs';
import { describe, expect, it } from 'vitest';
import { createJournalSource } from '../../drivers/journal-source.ts';
import { createInputReader, createInputRecorder, isJournalRecord, parseRecord, stringifyRecord, type JournalRecord } from '../../src/journal/journal-format.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';
import type { PipelineInput, SpectrumReading } from '../../src/pipeline/types.ts';
import { fuzz, FUZZ_TIMEOUT_MS } from '../fuzz/fuzz-runs.ts';

const tempDir = (): string => mkdtempSync(join(tmpdir(), 'fringe-spectra-'));
const header = { runId: 'run-s', startedAt: '2026-12-01T00:00:00.000Z', recipe: 'test', meta: { source: 'test' } };

const GRID = Float64Array.from({ length: 251 }, (_, i) => 400 + 2 * i);

/** A spectrum as an instrument's decimals give it: each value the double nearest a 6-decimal text. */
function instrumentSpectrum(t: number, seed: number): SpectrumReading {
  const values = new Float64Array(GRID.length);
  let x = seed;
  for (let i = 0; i < values.length; i++) {
    x = (x * 1103515245 + 12345) % 2147483648;
    const noise = (x / 2147483648 - 0.5) * 0.007; // about 0.2 % rms
    values[i] = Number((0.5 + 0.4 * Math.sin(i / 9) + noise).toFixed(6));
  }
  return { kind: 'spectrum', channel: 'spectral', wavelengthsNm: GRID, values, timeS: t, arrivalS: t + 0.01 };
}

const expectSameSpectrum = (back: PipelineInput | undefined, sent: SpectrumReading): void => {
  expect(back?.kind).toBe('spectrum');
  const s = back as SpectrumReading;
  expect(Array.from(s.values)).toEqual(Array.from(sent.values));
  expect(Array.from(s.wavelengthsNm)).toEqual(Array.from(sent.wavelengthsNm));
  expect([s.timeS, s.arrivalS]).toEqual([sent.timeS, sent.arrivalS]);
};

describe('spectra in the journal', () => {
  it('writes the grid once and reads every spectrum back exactly, between the other inputs', () => {
    const w = createJournalWriter(join(tempDir(), 'run'), header);
    const sent: PipelineInput[] = [];
    for (let i = 0; i < 20; i++) {
      const inputs: PipelineInput[] = [instrumentSpectrum(i * 0.2, i + 1), { kind: 'reading', channel: 'optical', value: i / 20, timeS: i * 0.2, arrivalS: i * 0.2 }];
      for (const input of inputs) {
        w.input(input);
        sent.push(input);
      }
    }
    // A percent instrument's values scaled by 0.01 have no short decimal form: kept as they are.
    const scaled: SpectrumReading = { ...instrumentSpectrum(5, 99), values: instrumentSpectrum(5, 99).values.map((v) => v * 100 * 0.01 + 1e-17) };
    w.input(scaled);
    sent.push(scaled);
    w.close();
    const j = readJournal(w.file);
    expect(j.damagedLines).toBe(0);
    expect(j.records.filter((r) => r.k === 'g')).toHaveLength(1);
    const read = createInputReader();
    const back = j.records.map(read).filter((x) => x !== undefined);
    expect(back).toHaveLength(sent.length);
    back.forEach((input, i) => {
      const s = sent[i] as PipelineInput;
      if (s.kind === 'spectrum') expectSameSpectrum(input, s);
      else expect(input).toEqual(s);
    });
    // Every spectrum read back shares one grid object, as the decoder's do.
    const grids = new Set(back.flatMap((x) => (x.kind === 'spectrum' ? [x.wavelengthsNm] : [])));
    expect(grids.size).toBe(1);
  });

  it('replays spectra identically through the journal source', async () => {
    const w = createJournalWriter(join(tempDir(), 'run'), header);
    const sent = Array.from({ length: 10 }, (_, i) => instrumentSpectrum(i * 0.2, i + 7));
    for (const s of sent) w.input(s);
    w.close();
    const scheduler = new VirtualTimeScheduler();
    const replayed = createJournalSource(readJournal(w.file).records, { speed: Number.POSITIVE_INFINITY, scheduler });
    const all = firstValueFrom(replayed.readings.pipe(toArray()));
    scheduler.flush();
    const got = await all;
    expect(got).toHaveLength(sent.length);
    got.forEach((g, i) => expectSameSpectrum(g, sent[i] as SpectrumReading));
  });

  it('stores a 251-wavelength spectrum of 6-decimal values in under 2 kB (5 a second: 36 MB an hour)', () => {
    const w = createJournalWriter(join(tempDir(), 'run'), header);
    const before = () => statSync(w.file).size;
    w.flush();
    const start = before();
    const count = 200;
    for (let i = 0; i < count; i++) w.input(instrumentSpectrum(1000 + i * 0.2, i + 3));
    w.close();
    const perSpectrum = (before() - start) / count;
    // Plain JSON of the doubles would be ~2.3 kB (8-character values); the 6-decimal integers ~1.8 kB.
    console.log(`journal: ${perSpectrum.toFixed(0)} bytes per 251-wavelength spectrum`);
    expect(perSpectrum).toBeLessThan(2000);
    const lines = readFileSync(w.file, 'utf8').trim().split('\n');
    expect(JSON.parse(lines.at(-1) as string)).toMatchObject({ k: 's', g: 1, q: 6 });
  });

  it('starts grids afresh after a resume (a new session writes its grid again)', () => {
    const dir = join(tempDir(), 'run');
    const first = createJournalWriter(dir, header);
    first.input(instrumentSpectrum(0, 1));
    first.close();
    const second = createJournalWriter(dir, header, { resumedAtS: 1 });
    const otherGrid: SpectrumReading = { ...instrumentSpectrum(2, 2), wavelengthsNm: GRID.map((nm) => nm + 1) };
    second.input(otherGrid);
    second.close();
    const read = createInputReader();
    const back = readJournal(second.file).records.map(read).filter((x) => x?.kind === 'spectrum');
    expect(back).toHaveLength(2);
    expectSameSpectrum(back[1], otherGrid);
  });

  it('gives no spectrum for a record whose grid is missing or does not fit, and refuses damaged shapes', () => {
    const read = createInputReader();
    expect(read({ k: 's', g: 1, t: 0, a: 0, v: [0.5, 0.5] })).toBeUndefined();
    read({ k: 'g', g: 1, nm: [400, 500, 600] });
    expect(read({ k: 's', g: 1, t: 0, a: 0, v: [0.5, 0.5] })).toBeUndefined();
    expect(read({ k: 's', g: 1, t: 0, a: 0, q: 1, v: [5, 5, 5] })).toMatchObject({ kind: 'spectrum', values: Float64Array.of(0.5, 0.5, 0.5) });
    for (const bad of [
      { k: 's', g: 1, t: 0, a: 0, v: [0.5, '0.5'] },
      { k: 's', g: 1.5, t: 0, a: 0, v: [0.5] },
      { k: 's', g: 1, t: 0, a: 0, q: 12, v: [5] },
      { k: 's', g: 1, t: '0', a: 0, v: [0.5] },
      { k: 'g', g: 1, nm: [] },
      { k: 'g', g: 1, nm: [400, null] },
      { k: 'i', t: 0, input: { kind: 'spectrum' } },
    ]) {
      expect(isJournalRecord(bad), JSON.stringify(bad)).toBe(false);
    }
  });

  it('round-trips any finite spectrum exactly (property)', () => {
    const value = fc.oneof(
      fc.double({ noNaN: true, noDefaultInfinity: true }).filter((v) => !Object.is(v, -0)),
      fc.integer({ min: -2_000_000, max: 2_000_000 }).map((n) => Number((n / 1e6).toFixed(6)) || 0),
    );
    fuzz(
      'journal spectra',
      fc.property(fc.array(value, { minLength: 1, maxLength: 64 }), fc.double({ noNaN: true, noDefaultInfinity: true, min: 0 }), (values, t) => {
        const grid = Float64Array.from(values, (_, i) => 300 + i);
        const sent: SpectrumReading = { kind: 'spectrum', channel: 'spectral', wavelengthsNm: grid, values: Float64Array.from(values), timeS: t, arrivalS: t };
        const record = createInputRecorder();
        const read = createInputReader();
        let back: PipelineInput | undefined;
        for (const r of record(sent)) {
          const parsed = parseRecord(stringifyRecord(r));
          expect(isJournalRecord(parsed)).toBe(true);
          back = read(parsed as JournalRecord) ?? back;
        }
        expectSameSpectrum(back, sent);
      }),
    );
  }, FUZZ_TIMEOUT_MS);
});
