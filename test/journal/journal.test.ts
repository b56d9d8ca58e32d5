// The journal: append-only NDJSON with its version first, readable up to the last complete line.
import { appendFileSync, existsSync, mkdirSync, mkdtempSync, readFileSync, symlinkSync, writeFileSync, writeSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import fc from 'fast-check';
import { describe, expect, it, vi } from 'vitest';
import { JOURNAL_VERSION, parseRecord, readingRecord, recordToInput, stringifyRecord, type JournalRecord } from '../../src/journal/journal-format.ts';
import { describeDamage, JournalError, openJournal, readJournal } from '../../src/journal/journal-reader.ts';
import { createJournalWriter, JournalWriteError, type JournalLoss, type JournalWrite } from '../../src/journal/journal-writer.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import type { PipelineInput, Reading } from '../../src/pipeline/types.ts';

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

const reading = (i: number): PipelineInput => ({ kind: 'reading', channel: i % 2 === 0 ? 'optical' : 'crystal', value: i / 7, timeS: i / 10, arrivalS: i / 10 + 0.001 });
const alertEvent = (i: number, message: string): RunEvent => ({ type: 'alert', timeS: i, id: `A${i}`, severity: 'warning', code: 'rate-out-of-band', message, layer: 1 });

/** A journal of `n` readings with an alert (non-ASCII message) every tenth, written by the writer. */
function writeJournal(name: string, n: number, message = 'Rate 0.3 nm/s is 12 % off — Δ µ'): string {
  const w = createJournalWriter(join(tempDir(), name), header);
  for (let i = 0; i < n; i++) {
    w.input(reading(i));
    if (i % 10 === 9) w.event(alertEvent(i, message));
  }
  w.close();
  return w.file;
}

describe('reading a journal as a stream', () => {
  it('gives the same records whatever the chunk size: lines and multi-byte characters split across chunks', () => {
    const file = writeJournal('chunks', 40, 'naïve € 𝄞 ✓');
    const whole = readJournal(file);
    expect(whole.records).toHaveLength(44);
    for (const chunkBytes of [1, 2, 3, 5, 7, 64]) {
      const j = readJournal(file, { chunkBytes });
      expect(j.records, `chunk ${chunkBytes}`).toEqual(whole.records);
      expect(j.damagedLines).toBe(0);
    }
    expect((whole.records[10] as { event: { message: string } }).event.message).toBe('naïve € 𝄞 ✓');
  });

  it('gives the same records for any chunking of any journal (property)', () => {
    const text = fc.string({ unit: fc.constantFrom('a', 'é', '€', '𝄞', ' ', '"', '\\') });
    fc.assert(
      fc.property(fc.array(fc.tuple(fc.double({ noNaN: false }), text), { maxLength: 12 }), fc.integer({ min: 1, max: 40 }), (rows, chunkBytes) => {
        const w = createJournalWriter(join(tempDir(), 'prop'), header);
        rows.forEach(([v, message], i) => {
          w.input({ kind: 'reading', channel: 'optical', value: v, timeS: i, arrivalS: i });
          w.event(alertEvent(i, message));
        });
        w.close();
        const expected = readJournal(w.file, { chunkBytes: 1 << 20 }).records;
        expect(expected).toHaveLength(2 * rows.length);
        expect(readJournal(w.file, { chunkBytes }).records).toEqual(expected);
      }),
      { numRuns: 60 },
    );
  });

  it('streams records one by one: a pass reads the file afresh and reports what it found', () => {
    const file = writeJournal('stream', 25);
    const journal = openJournal(file, { chunkBytes: 16 });
    const iterator = journal.records[Symbol.iterator]();
    expect(iterator.next().value).toMatchObject({ k: 'r', t: 0 });
    expect([...journal.records]).toHaveLength(27);
    appendFileSync(file, '{"k":"r","c":"o","t":3');
    expect([...journal.records]).toHaveLength(27);
    expect(journal.report).toEqual({ truncated: true, truncatedLine: 29, damagedLines: 0, firstDamaged: [], lostLines: 0, firstLost: [] });
  });

  it('skips damaged lines inside the journal and says which', () => {
    const file = writeJournal('damaged', 20);
    const lines = readFileSync(file, 'utf8').split('\n');
    lines[3] = '{"k":"r","c":"o","t":0.2,"v":0.'; // a torn write
    lines[5] = '{"k":"r","c":"q","t":1,"v":1,"a":1}'; // no such channel
    lines[7] = '\u0000\u00ff\u0007garbage';
    lines[9] = '{"k":"e","event":{"type":"cut"}}'; // an event with no time
    writeFileSync(file, lines.join('\n'));
    const j = readJournal(file, { chunkBytes: 7 });
    expect(j.damagedLines).toBe(4);
    expect(j.firstDamaged).toEqual([
      { line: 4, reason: 'not JSON' },
      { line: 6, reason: 'not a journal record' },
      { line: 8, reason: 'not JSON' },
      { line: 10, reason: 'not a journal record' },
    ]);
    expect(j.records).toHaveLength(22 - 4);
    // The damaged lines held the numbers that are missing: no line is reported lost besides.
    expect(j.lostLines).toBe(0);
    expect(describeDamage(file, j)).toBe(`${file}: skipped 4 damaged lines: lines 4 (not JSON), 6 (not a journal record), 8 (not JSON), 10 (not a journal record)`);
  });

  it('sees a changed digit, a line repeated and a line lost by the lines’ checks, each at its line, and reads on after it', () => {
    const file = writeJournal('checked', 20);
    const lines = readFileSync(file, 'utf8').split('\n');
    const clean = readJournal(file).records;
    lines[3] = (lines[3] as string).replace('"v":0.', '"v":1.'); // a reading's value changed: still JSON, still a record
    lines.splice(8, 0, lines[7] as string); // line 8 written twice
    lines.splice(15, 1); // a line lost (the 15th written)
    writeFileSync(file, lines.join('\n'));
    const j = readJournal(file);
    expect(j.firstDamaged).toEqual([
      { line: 4, reason: 'altered' },
      { line: 9, reason: 'out of place' },
    ]);
    expect(j.firstLost).toEqual([{ line: 16, count: 1 }]);
    // Every record read is one written, in order, none twice.
    expect(j.records).toEqual(clean.filter((_, i) => ![2, 13].includes(i)));
    expect(describeDamage(file, j)).toBe(`${file}: skipped 2 damaged lines: lines 4 (altered: its check fails), 9 (repeated or out of place); 1 line missing (1 before line 16)`);
  });

  it('reads a journal from before the lines carried checks as it stands', () => {
    const dir = tempDir();
    const file = join(dir, 'journal.ndjson');
    writeFileSync(file, `${JSON.stringify({ journal: 'fringe', version: 1, ...header })}\n{"k":"r","c":"o","t":0,"v":0.5,"a":0}\n{"k":"r","c":"o","t":0.1,"v":0.6,"a":0.1}\n`);
    expect(readJournal(file)).toMatchObject({ damagedLines: 0, records: [{ t: 0, v: 0.5 }, { t: 0.1, v: 0.6 }] });
    // Resumed by this fringe: the new lines carry checks, numbered from 1.
    const w = createJournalWriter(dir, header, { resumedAtS: 0.2 });
    w.input(reading(3));
    w.close();
    expect(readJournal(file)).toMatchObject({ damagedLines: 0, records: [{ t: 0 }, { t: 0.1 }, { k: 'm', t: 0.2 }, { t: 0.3 }] });
  });

  it('skips a line too long to hold without holding it', () => {
    const w = createJournalWriter(join(tempDir(), 'long'), header);
    w.input(reading(0));
    w.input({ kind: 'operator', action: 'hold', timeS: 1, note: 'x'.repeat(5000) } as PipelineInput);
    for (let i = 1; i < 5; i++) w.input(reading(i));
    w.close();
    const file = w.file;
    const j = readJournal(file, { chunkBytes: 64, maxLineBytes: 1000 });
    expect(j.firstDamaged).toEqual([{ line: 3, reason: 'too long' }]);
    expect(j.records).toHaveLength(5);
    expect(readJournal(file, { chunkBytes: 64 }).records).toHaveLength(6);
  });

  it('refuses a first line that is no header in one sentence naming the file, never quoting it', () => {
    const dir = tempDir();
    const cases: [string, string | Buffer, RegExp][] = [
      ['recipe.yaml', 'name: AR coating\nlayers:\n  - H\n', /recipe\.yaml is not a fringe journal/],
      ['junk.bin', Buffer.from([0x00, 0xff, 0x1b, 0x5b, 0x32, 0x4a, 0x07, 0x0a, 0x01]), /junk\.bin is not a fringe journal/],
      ['long.bin', Buffer.alloc(3 << 20, 0x41), /long\.bin is not a fringe journal/],
      ['array.ndjson', '[1,2]\n', /is not a fringe journal/],
      ['no-run.ndjson', '{"journal":"fringe","version":1,"startedAt":"x","recipe":"r","meta":{}}\n', /no-run\.ndjson has a damaged header: its runId is not a string/],
      ['bad-start.ndjson', '{"journal":"fringe","version":1,"runId":"a","startedAt":5,"recipe":"r","meta":{}}\n', /its startedAt is not a string/],
      ['no-meta.ndjson', '{"journal":"fringe","version":1,"runId":"a","startedAt":"x","recipe":"r"}\n', /its meta is not an object/],
      ['version.ndjson', '{"journal":"fringe","version":"one"}\n', /is journal version of no known version; this fringe reads version 1/],
      ['empty.ndjson', '', /empty\.ndjson is empty: it holds no journal/],
      ['torn.ndjson', '{"journal":"fri', /torn\.ndjson holds no complete line/],
    ];
    for (const [name, content, message] of cases) {
      writeFileSync(join(dir, name), content);
      let error: unknown;
      try {
        readJournal(join(dir, name));
      } catch (e) {
        error = e;
      }
      expect(error, name).toBeInstanceOf(JournalError);
      const text = (error as Error).message;
      expect(text, name).toMatch(message);
      expect(text, name).toContain(join(dir, name));
      expect(text, name).not.toMatch(/AR coating|AAAA/);
      expect([...text].filter((c) => c.charCodeAt(0) < 0x20 || (c.charCodeAt(0) >= 0x7f && c.charCodeAt(0) <= 0xff)), name).toEqual([]);
    }
    expect(() => readJournal(dir)).toThrow(/cannot be read: it is a folder/);
  });
});

describe('resuming a journal', () => {
  it('starts on a fresh line after a torn last line, records where it resumed, and reads back whole', () => {
    const file = writeJournal('resume', 10);
    appendFileSync(file, '{"k":"r","c":"o","t":0.95,"v":0.'); // the crash tore the last line
    const before = readJournal(file);
    expect(before.truncated).toBe(true);
    const resumedHeader = { ...header, startedAt: '2026-12-01T01:00:00.000Z', meta: { source: 'live', clock: 'instrument' } };
    const w = createJournalWriter(dirname(file), resumedHeader, { resumedAtS: 0.9 });
    w.input(reading(10));
    w.close();
    const after = readJournal(file, { chunkBytes: 5 });
    expect(after.truncated).toBe(false);
    expect(after.firstDamaged).toEqual([{ line: 13, reason: 'not JSON' }]);
    expect(after.lostLines).toBe(0);
    expect(after.records).toHaveLength(before.records.length + 2);
    expect(after.records.at(-2)).toEqual({ k: 'm', t: 0.9, mark: 'resumed', at: '2026-12-01T01:00:00.000Z', meta: { source: 'live', clock: 'instrument' } });
    expect(after.records.at(-1)).toEqual(readingRecord(reading(10) as Reading));
    // One header: the first session's.
    expect(after.header.startedAt).toBe(header.startedAt);
    expect(readFileSync(file, 'utf8').match(/"journal":"fringe"/g)).toHaveLength(1);
  });

  it('adds no empty line after a journal that ends cleanly', () => {
    const file = writeJournal('clean', 3);
    createJournalWriter(dirname(file), header, { resumedAtS: 1 }).close();
    expect(readFileSync(file, 'utf8')).not.toMatch(/\n\n/);
    expect(readJournal(file).damagedLines).toBe(0);
  });

  it('refuses to append to another run’s journal unless told it resumes', () => {
    const file = writeJournal('other', 3);
    expect(() => createJournalWriter(dirname(file), header)).toThrow(JournalWriteError);
    expect(() => createJournalWriter(dirname(file), header)).toThrow(/already holds a journal/);
  });
});

/** A write that fails with `code` while `failing()` says so, else writes through (at most `maxChunk` bytes a call). */
function flakyWrite(failing: () => boolean, code = 'ENOSPC', maxChunk = Number.POSITIVE_INFINITY): { write: JournalWrite; calls: number } {
  const counter = { write: ((fd, data, offset) => {
    counter.calls++;
    if (failing()) throw Object.assign(new Error(`${code}: simulated failure, write`), { code });
    return writeSync(fd, data, offset, Math.min(maxChunk, data.length - offset));
  }) as JournalWrite, calls: 0 };
  return counter;
}

describe('a journal the disk refuses', () => {
  it('never throws, holds the lines back, reports once, and writes them all in order when the disk recovers', () => {
    let full = false;
    const { write } = flakyWrite(() => full);
    const errors: [string, JournalLoss][] = [];
    const recoveries: JournalLoss[] = [];
    const w = createJournalWriter(join(tempDir(), 'full'), header, {
      flushIntervalMs: 60_000,
      maxBufferBytes: 200,
      write,
      onWriteError: (e, loss) => errors.push([e.message, loss]),
      onWriteRecovered: (loss) => recoveries.push(loss),
    });
    w.input(reading(0));
    w.flush();
    full = true;
    expect(() => {
      for (let i = 1; i < 30; i++) w.input(reading(i));
      w.event(alertEvent(30, 'm'));
      w.flush();
      w.sync();
      w.event(alertEvent(31, 'm'));
    }).not.toThrow();
    expect(errors).toHaveLength(1);
    expect(errors[0]?.[0]).toMatch(/ENOSPC/);
    expect(errors[0]?.[1].droppedReadings).toBe(0);
    expect(recoveries).toHaveLength(0);
    expect(readJournal(w.file).records).toHaveLength(1);
    full = false;
    w.flush();
    expect(recoveries).toEqual([{ pendingBytes: 0, droppedReadings: 0 }]);
    const records = readJournal(w.file).records;
    expect(records).toHaveLength(32);
    expect(records.filter((r) => r.k === 'r').map((r) => (r as { t: number }).t)).toEqual(Array.from({ length: 30 }, (_, i) => i / 10));
    expect(w.close()).toEqual({ pendingBytes: 0, droppedReadings: 0 });
  });

  it('keeps the rest of a line a failed write cut short, so no line is torn', () => {
    let calls = 0;
    let flaky = false;
    // Writes 10 bytes at a time; once the header is out, every third call fails for a while.
    const write: JournalWrite = (fd, data, offset) => {
      calls++;
      if (flaky && calls % 3 === 0) throw Object.assign(new Error('EIO: i/o error, write'), { code: 'EIO' });
      return writeSync(fd, data, offset, Math.min(10, data.length - offset));
    };
    let reported = 0;
    const w = createJournalWriter(join(tempDir(), 'torn'), header, { flushIntervalMs: 60_000, write, onWriteError: () => reported++ });
    flaky = true;
    let tornOnDisk = false;
    for (let i = 0; i < 20; i++) {
      w.input(reading(i));
      w.flush();
      tornOnDisk ||= !readFileSync(w.file, 'utf8').endsWith('\n');
    }
    flaky = false;
    expect(w.close()).toEqual({ pendingBytes: 0, droppedReadings: 0 });
    expect(tornOnDisk).toBe(true); // the failures did fall inside lines
    expect(reported).toBeGreaterThan(0);
    const j = readJournal(w.file);
    expect(j.damagedLines).toBe(0);
    expect(j.records.map((r) => (r as { t: number }).t)).toEqual(Array.from({ length: 20 }, (_, i) => i / 10));
  });

  it('stays bounded while it fails: the oldest readings go first, counted, and never an event', () => {
    let full = false;
    const errors: JournalLoss[] = [];
    const w = createJournalWriter(join(tempDir(), 'bounded'), header, {
      flushIntervalMs: 60_000,
      maxPendingBytes: 4000,
      write: flakyWrite(() => full).write,
      onWriteError: (_e, loss) => errors.push(loss),
    });
    full = true;
    w.event(alertEvent(0, 'first'));
    for (let i = 0; i < 500; i++) {
      w.input(reading(i));
      if (i % 100 === 50) w.event(alertEvent(i, 'kept'));
    }
    full = false;
    const loss = w.close();
    expect(errors).toHaveLength(1);
    expect(loss.pendingBytes).toBe(0);
    const j = readJournal(w.file);
    const events = j.records.filter((r) => r.k === 'e');
    expect(events).toHaveLength(6);
    const readings = j.records.filter((r) => r.k === 'r').map((r) => (r as { t: number }).t);
    expect(loss.droppedReadings).toBe(500 - readings.length);
    expect(loss.droppedReadings).toBeGreaterThan(400);
    // The newest are kept, in order.
    expect(readings.at(-1)).toBe(49.9);
    expect(readings).toEqual([...readings].sort((a, b) => a - b));
    expect(readFileSync(w.file, 'utf8').length).toBeLessThan(4000 + 1000);
  });

  it('does not throw from its flush timer', async () => {
    let full = false;
    const errors: string[] = [];
    const w = createJournalWriter(join(tempDir(), 'timer'), header, { flushIntervalMs: 5, write: flakyWrite(() => full).write, onWriteError: (e) => errors.push(e.message) });
    // The header went out before the disk filled: now it is full.
    full = true;
    w.input(reading(0));
    await vi.waitFor(() => expect(errors).toHaveLength(1), { timeout: 5000 });
    full = false;
    await vi.waitFor(() => expect(readJournal(w.file).records).toHaveLength(1), { timeout: 5000 });
    w.close();
  });

  it('reports a failing sync to disk, and its recovery', () => {
    let failSync = false;
    const states: string[] = [];
    const w = createJournalWriter(join(tempDir(), 'fsync'), header, {
      fsync: () => {
        if (failSync) throw Object.assign(new Error('EIO: i/o error, fsync'), { code: 'EIO' });
      },
      onWriteError: (e) => states.push(`failed ${e.message}`),
      onWriteRecovered: () => states.push('recovered'),
    });
    failSync = true;
    w.event(alertEvent(1, 'a'));
    w.event(alertEvent(2, 'b'));
    failSync = false;
    w.event(alertEvent(3, 'c'));
    w.close();
    expect(states).toEqual(['failed EIO: i/o error, fsync', 'recovered']);
    expect(readJournal(w.file).records).toHaveLength(3);
  });

  it('refuses to start a journal on a full device (/dev/full) in one sentence', () => {
    if (!existsSync('/dev/full')) {
      expect(process.platform).not.toBe('linux');
      return;
    }
    const dir = join(tempDir(), 'dev-full');
    mkdirSync(dir);
    symlinkSync('/dev/full', join(dir, 'journal.ndjson'));
    expect(() => createJournalWriter(dir, header)).toThrow(JournalWriteError);
    expect(() => createJournalWriter(dir, header)).toThrow(/journal\.ndjson cannot be written: ENOSPC/);
  });

  it('refuses a file beside the journal that cannot be written in one sentence naming it, leaving no temp file', () => {
    const dir = join(tempDir(), 'beside');
    const w = createJournalWriter(dir, header);
    if (existsSync('/dev/full')) {
      // The atomic write goes through a temp file named after this process: on a full device.
      symlinkSync('/dev/full', join(dir, `recipe.json.tmp-${process.pid}`));
      expect(() => w.writeFile('recipe.json', '{}\n')).toThrow(JournalWriteError);
      expect(existsSync(join(dir, `recipe.json.tmp-${process.pid}`))).toBe(false);
      symlinkSync('/dev/full', join(dir, `recipe.json.tmp-${process.pid}`));
      expect(() => w.writeFile('recipe.json', '{}\n')).toThrow(`${join(dir, 'recipe.json')} cannot be written: the disk is full`);
    }
    // A folder where the file should go cannot be renamed over.
    mkdirSync(join(dir, 'summary.json', 'inside'), { recursive: true });
    expect(() => w.writeFile('summary.json', '{}\n')).toThrow(new RegExp(`^${join(dir, 'summary.json').replace(/[.*+?^${}()|[\]\\]/g, '\\$&')} cannot be written: `));
    expect(existsSync(join(dir, `summary.json.tmp-${process.pid}`))).toBe(false);
    w.close();
  });

  it('refuses a journal under a file or on a kernel pseudo file system in one sentence', () => {
    const file = join(tempDir(), 'plain-file');
    writeFileSync(file, 'x');
    expect(() => createJournalWriter(join(file, 'run'), header)).toThrow(`${join(file, 'run', 'journal.ndjson')} cannot be opened for the journal: ${file} is a file, not a folder`);
    // (Under /proc/fringe-test a recursive mkdir spins for ever: the command-line tests try that in a child with a time limit.)
    if (process.platform === 'linux') expect(() => createJournalWriter('/sys/fringe-test', header)).toThrow(/\/sys is on the kernel's sysfs pseudo file system/);
  });
});
