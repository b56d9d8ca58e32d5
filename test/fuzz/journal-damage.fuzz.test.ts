// A real journal (a short simulated run) cut or corrupted at random points: a byte range
// deleted, overwritten or written twice. Reading it never throws anything but a JournalError
// naming the file (and that only when the header is hit); every record before the damage reads
// back as written; damaged lines are reported by their numbers, none before the damage; and the
// records that survive replay through the controller without an exception.
import { mkdirSync, mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { isDeepStrictEqual } from 'node:util';
import fc from 'fast-check';
import { beforeAll, describe, expect, it } from 'vitest';
import { createVirtualChamber } from '../../sim/index.ts';
import { recordToInput, sealLine, type JournalRecord } from '../../src/journal/journal-format.ts';
import { describeDamage, JournalError, readJournal, type JournalContents } from '../../src/journal/journal-reader.ts';
import { createJournalWriter } from '../../src/journal/journal-writer.ts';
import { createController, type Controller } from '../../src/pipeline/controller.ts';
import { replayJournal } from '../../src/pipeline/replay.ts';
import { createSteppedRun } from '../../src/pipeline/run-stepped.ts';
import type { PipelineInput } from '../../src/pipeline/types.ts';
import { ar4, typical } from '../server/support.ts';
import { fuzz, FUZZ_TIMEOUT_MS } from './fuzz-runs.ts';

let original: Buffer;
let records: JournalRecord[];
/** Byte offset of the end of each line (just past its newline); line n ends at lineEnds[n - 1]. */
let lineEnds: number[];
let controller: Controller;
const dir = mkdtempSync(join(tmpdir(), 'fringe-fuzz-journal-'));

beforeAll(() => {
  const plain = createController(ar4, { estimator: 'plain' });
  const writer = createJournalWriter(join(dir, 'run'), { runId: 'fuzz', startedAt: '2026-01-01T00:00:00.000Z', recipe: ar4.name, meta: { source: 'simulator', seed: 5, estimator: 'plain' } });
  const run = createSteppedRun(plain, createVirtualChamber(ar4, typical, 5), { onInput: (i) => writer.input(i), onEvent: (e) => writer.event(e) });
  run.runUntil(12);
  writer.close();
  original = readFileSync(writer.file);
  records = readJournal(writer.file).records;
  lineEnds = [];
  for (let at = original.indexOf(10); at >= 0; at = original.indexOf(10, at + 1)) lineEnds.push(at + 1);
  // The plan is the costly part of a controller's start; replays share one (the plain rules keep no mutable state in it).
  const plan = plain.initial().plan;
  controller = { ...plain, initial: () => plain.initial(plan) };
});

type Damage = { kind: 'delete' | 'overwrite' | 'duplicate' | 'cut'; at: number; length: number; bytes: Uint8Array };

const damage: fc.Arbitrary<Damage> = fc.record({
  kind: fc.constantFrom<Damage['kind']>('delete', 'overwrite', 'duplicate', 'cut'),
  at: fc.double({ min: 0, max: 1, noNaN: true }).map((x) => x),
  length: fc.oneof(fc.integer({ min: 1, max: 8 }), fc.integer({ min: 1, max: 4000 })),
  bytes: fc.oneof(fc.uint8Array({ minLength: 1, maxLength: 64 }), fc.constantFrom(Uint8Array.from([10]), Uint8Array.from([0]), new TextEncoder().encode('{"k":"r"}\n'), Uint8Array.from([0xff, 0xfe]))),
});

/** The damaged bytes, and the offset of the first byte that differs from the original. */
function damaged(d: Damage): { bytes: Buffer; from: number } {
  const at = Math.min(original.length - 1, Math.floor(d.at * original.length));
  const end = Math.min(original.length, at + d.length);
  switch (d.kind) {
    case 'delete':
      return { bytes: Buffer.concat([original.subarray(0, at), original.subarray(end)]), from: at };
    case 'cut':
      return { bytes: original.subarray(0, at), from: at };
    case 'duplicate':
      return { bytes: Buffer.concat([original.subarray(0, end), original.subarray(at, end), original.subarray(end)]), from: end };
    case 'overwrite': {
      const bytes = Buffer.from(original);
      bytes.set(d.bytes.subarray(0, bytes.length - at), at);
      return { bytes, from: at };
    }
  }
}

describe('a journal damaged at random points', () => {
  it('reads back every record before the damage, reports damaged lines after it, and replays', () => {
    const file = join(dir, 'damaged.ndjson');
    fuzz(
      'journal: read and replay',
      fc.property(damage, (d) => {
        const { bytes, from } = damaged(d);
        writeFileSync(file, bytes);
        let read: JournalContents;
        try {
          read = readJournal(file);
        } catch (error) {
          // Only a damaged first line loses the journal, and that is said in one sentence naming the file.
          expect(error).toBeInstanceOf(JournalError);
          expect((error as Error).message.startsWith(file)).toBe(true);
          expect((error as Error).message).not.toMatch(/\n/);
          expect(from).toBeLessThan(lineEnds[0] as number);
          return;
        }
        // Whole lines before the first changed byte: the header and this many records, unchanged.
        const intactLines = lineEnds.filter((end) => end <= from).length;
        const intactRecords = Math.max(0, intactLines - 1);
        expect(read.records.slice(0, intactRecords)).toEqual(records.slice(0, intactRecords));
        for (const line of read.firstDamaged) expect(line.line).toBeGreaterThan(intactLines);
        expect(read.damagedLines).toBeGreaterThanOrEqual(read.firstDamaged.length);
        // Nothing is invented: at most as many records as the lines that could hold one.
        const lines = bytes.toString('latin1').split('\n').length - 1;
        const headerDamaged = read.firstDamaged.some((l) => l.line === 1) ? 1 : 0;
        expect(read.records.length + read.damagedLines).toBeLessThanOrEqual(Math.max(0, lines - 1 + headerDamaged));
        replayJournal(read.records, controller);
      }),
    );
  }, FUZZ_TIMEOUT_MS);

  it('never yields a record it was not given, names the first damaged line, and takes a resumed session after it', () => {
    const file = join(dir, 'checked', 'journal.ndjson');
    mkdirSync(dirname(file), { recursive: true });
    const resumedRecord: JournalRecord = { k: 'r', c: 'o', t: 999, v: 0.5, a: 999 };
    fuzz(
      'journal: no silently wrong record',
      fc.property(damage, (d) => {
        const { bytes, from } = damaged(d);
        writeFileSync(file, bytes);
        let read: JournalContents;
        try {
          read = readJournal(file);
        } catch {
          return; // the header was hit: the property above holds the sentence to account
        }
        // Every record read is one written, in the order written, none twice: a subsequence.
        let next = 0;
        for (const record of read.records) {
          const at = records.findIndex((r, i) => i >= next && isDeepStrictEqual(r, record));
          expect(at, `record ${JSON.stringify(record)} was never written there`).toBeGreaterThanOrEqual(0);
          next = at + 1;
        }
        // Unless the file is the journal cut at a line's end, the damage is named, no line before it.
        const cleanCut = bytes.length <= original.length && original.subarray(0, bytes.length).equals(bytes) && (bytes.length === 0 || bytes[bytes.length - 1] === 10);
        if (!cleanCut) {
          const damage = describeDamage(file, read);
          expect(damage, 'the damage is reported').not.toBeNull();
          const firstLine = Math.min(...read.firstDamaged.map((l) => l.line), ...read.firstLost.map((l) => l.line), read.truncatedLine ?? Number.POSITIVE_INFINITY);
          expect(firstLine).toBeGreaterThan(lineEnds.filter((end) => end <= from).length);
          expect(damage?.slice(file.length)).toMatch(new RegExp(`\\b${firstLine}\\b`));
          expect(damage).not.toMatch(/\n/);
        }
        // A session resumed after the damage is read back whole.
        const writer = createJournalWriter(dirname(file), { runId: 'fuzz', startedAt: '2026-01-01T01:00:00.000Z', recipe: ar4.name, meta: {} }, { resumedAtS: 999 });
        writer.input(recordToInput(resumedRecord) as PipelineInput);
        writer.close();
        const after = readJournal(file);
        expect(after.records.slice(-2)).toEqual([expect.objectContaining({ k: 'm', t: 999 }), resumedRecord]);
      }),
    );
  }, FUZZ_TIMEOUT_MS);

  it('replays records whose fields were changed to other values without an exception', () => {
    const file = join(dir, 'edited.ndjson');
    const header = original.subarray(0, lineEnds[0]);
    const value = fc.constantFrom<unknown>(null, true, -1, 0, 1e308, -1e308, 'NaN', 'Infinity', '', 'x', [], {}, { kind: 'reading' }, { kind: 'operator' }, { kind: 'tick' });
    const edit = fc.tuple(fc.nat(), fc.nat(), value);
    fuzz(
      'journal: edited records replayed',
      fc.property(fc.array(edit, { minLength: 1, maxLength: 3 }), (edits) => {
        // The run's first 120 records (its start, ticks, readings, decisions): a longer journal costs more, not more shapes.
        const copy = structuredClone(records.slice(0, 120)) as unknown as Record<string, unknown>[];
        for (const [which, where, to] of edits) {
          // A field anywhere in the record, nested ones included (an input's or an event's).
          let holder = copy[which % copy.length] as Record<string, unknown>;
          const fields = (h: Record<string, unknown>): string[] => Object.keys(h);
          let key = fields(holder)[where % fields(holder).length] as string;
          const inner = holder[key];
          if (inner !== null && typeof inner === 'object' && !Array.isArray(inner) && Object.keys(inner).length > 0 && where % 2 === 0) {
            holder = inner as Record<string, unknown>;
            key = fields(holder)[Math.floor(where / 2) % fields(holder).length] as string;
          }
          holder[key] = to;
        }
        // Sealed as the writer would: the edits are what a bug writes, not damage the check would catch.
        writeFileSync(file, Buffer.concat([header, Buffer.from(copy.map((r, i) => `${sealLine(JSON.stringify(r), i + 1)}\n`).join(''))]));
        const read = readJournal(file);
        expect(read.firstDamaged.filter((d) => d.reason === 'altered')).toEqual([]);
        replayJournal(read.records, controller);
      }),
    );
  }, FUZZ_TIMEOUT_MS);
});
