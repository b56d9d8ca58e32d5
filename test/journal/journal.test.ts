// The journal: append-only NDJSON with its version first, readable up to the last complete line.
import { appendFileSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { JOURNAL_VERSION, parseRecord, recordToInput, stringifyRecord, type JournalRecord } from '../../src/journal/journal-format.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';

const tempDir = (): string => mkdtempSync(join(tmpdir(), 'fringe-journal-'));
const header = { runId: 'run-1', startedAt: '2026-12-01T00:00:00.000Z', recipe: 'test', meta: { source: 'test' } };

describe('journal', () => {
  it('writes the version first, then inputs and events, and reads them back', () => {
    const w = createJournalWriter(join(tempDir(), 'run-1'), header);
    w.input({ kind: 'reading', channel: 'optical', value: 0.5, timeS: 1, arrivalS: 1.001 });
    w.input({ kind: 'operator', action: 'hold', timeS: 2 });
    const cut: RunEvent = { type: 'cut', timeS: 3, layer: 1, reason: 'trigger-level', estimatedNm: 10, delayAllowanceNm: 0.1, signal: Number.NaN };
    w.event(cut);
    w.close();
    const first = readFileSync(w.file, 'utf8').split('\n')[0] ?? '';
    expect(JSON.parse(first)).toMatchObject({ journal: 'fringe', version: JOURNAL_VERSION, runId: 'run-1' });
    const j = readJournal(w.file);
    expect(j.truncated).toBe(false);
    expect(j.records).toHaveLength(3);
    expect(recordToInput(j.records[0] as JournalRecord)).toEqual({ kind: 'reading', channel: 'optical', value: 0.5, timeS: 1, arrivalS: 1.001 });
    expect(recordToInput(j.records[1] as JournalRecord)).toEqual({ kind: 'operator', action: 'hold', timeS: 2 });
    // NaN survives the round trip (JSON itself has none).
    expect((j.records[2] as { event: RunEvent }).event).toEqual(cut);
  });

  it('syncs decisions at once and buffers readings at most a flush interval', () => {
    const w = createJournalWriter(join(tempDir(), 'run-2'), header, { flushIntervalMs: 60_000 });
    w.input({ kind: 'reading', channel: 'crystal', value: 5.9e6, timeS: 1, arrivalS: 1 });
    expect(readJournal(w.file).records).toHaveLength(0); // still buffered
    w.event({ type: 'alert', timeS: 1, id: 'A1', severity: 'warning', code: 'rate-out-of-band', message: 'm', layer: 1 });
    expect(readJournal(w.file).records).toHaveLength(2); // the alert flushed the reading before it
    w.close();
  });

  it('reads a journal cut off inside its last line up to the last complete line', () => {
    const w = createJournalWriter(join(tempDir(), 'run-3'), header);
    for (let i = 0; i < 10; i++) w.input({ kind: 'reading', channel: 'optical', value: i / 10, timeS: i, arrivalS: i });
    w.close();
    appendFileSync(w.file, '{"k":"r","c":"o","t":10,"v":0.');
    const j = readJournal(w.file);
    expect(j.truncated).toBe(true);
    expect(j.records).toHaveLength(10);
  });

  it('refuses what is not a journal of this version, in one sentence', () => {
    const dir = tempDir();
    writeFileSync(join(dir, 'a.ndjson'), '{"journal":"fringe","version":99}\n');
    expect(() => readJournal(join(dir, 'a.ndjson'))).toThrow(/version 99; this fringe reads version 1/);
    writeFileSync(join(dir, 'b.ndjson'), '{"hello":1}\n');
    expect(() => readJournal(join(dir, 'b.ndjson'))).toThrow(/not a fringe journal/);
    expect(() => readJournal(join(dir, 'missing.ndjson'))).toThrow(/no such file/);
  });

  it('writes files beside the journal atomically', () => {
    const w = createJournalWriter(join(tempDir(), 'run-4'), header);
    w.writeFile('summary.json', '{"ok":true}\n');
    expect(readFileSync(join(w.dir, 'summary.json'), 'utf8')).toBe('{"ok":true}\n');
    w.close();
  });

  it('round-trips any finite or non-finite number (property)', () => {
    fc.assert(
      fc.property(fc.double(), fc.double(), (v, t) => {
        const record: JournalRecord = { k: 'r', c: 'o', t, v, a: t };
        const back = parseRecord(stringifyRecord(record)) as { v: number; t: number };
        // −0 comes back as 0, which compares equal; NaN and ±Infinity come back as themselves.
        const same = (a: number, b: number): boolean => (Number.isNaN(a) ? Number.isNaN(b) : a === b);
        return same(v, back.v) && same(t, back.t);
      }),
    );
  });
});
