/**
 * Writing a run to `runs/<id>/`: the journal is appended in batches, flushed at least once a
 * second and synced to disk at every cut and alert, so a crash loses at most the last second of
 * readings and never a decision. The summary is written atomically (temp file, then rename).
 */
import { closeSync, existsSync, fsyncSync, mkdirSync, openSync, renameSync, statSync, writeFileSync, writeSync } from 'node:fs';
import { join } from 'node:path';
import type { RunEvent } from '../pipeline/events.ts';
import type { PipelineInput } from '../pipeline/types.ts';
import { JOURNAL_VERSION, readingRecord, stringifyRecord, type JournalHeader, type JournalRecord } from './journal-format.ts';

export interface JournalWriter {
  readonly dir: string;
  readonly file: string;
  /** Records an input: readings in compact form, others whole. */
  input(input: PipelineInput): void;
  /** Records a decision; cuts, alerts and the run's end are synced to disk at once. */
  event(event: RunEvent): void;
  /** Writes what is buffered. */
  flush(): void;
  /** Writes and syncs to disk what is buffered. */
  sync(): void;
  /** Writes a file beside the journal atomically. */
  writeFile(name: string, text: string): void;
  close(): void;
}

export interface JournalWriterOptions {
  /** Flush at least this often, ms (default 1000). */
  flushIntervalMs?: number;
  /** Flush when this many bytes are waiting (default 256 KiB). */
  maxBufferBytes?: number;
}

const SYNCED_EVENTS = new Set<RunEvent['type']>(['cut', 'alert', 'layer-finished', 'run-finished', 'mode-changed']);

/**
 * Creates `dir` (and parents) and opens its journal for appending, first line the header. An
 * existing journal (a resumed run) is appended to as it is: it keeps its one header.
 */
export function createJournalWriter(
  dir: string,
  header: Omit<JournalHeader, 'journal' | 'version'>,
  options: JournalWriterOptions = {},
): JournalWriter {
  mkdirSync(dir, { recursive: true });
  const file = join(dir, 'journal.ndjson');
  const resuming = existsSync(file) && statSync(file).size > 0;
  const fd = openSync(file, 'a');
  const maxBytes = options.maxBufferBytes ?? 256 * 1024;
  let buffer: string[] = [];
  let bytes = 0;
  let closed = false;

  const flush = (): void => {
    if (buffer.length === 0 || closed) return;
    writeSync(fd, buffer.join(''));
    buffer = [];
    bytes = 0;
  };
  const sync = (): void => {
    flush();
    if (!closed) fsyncSync(fd);
  };
  const push = (record: JournalRecord | JournalHeader): void => {
    const line = `${stringifyRecord(record)}\n`;
    buffer.push(line);
    bytes += line.length;
    if (bytes >= maxBytes) flush();
  };
  const timer = setInterval(flush, options.flushIntervalMs ?? 1000);
  timer.unref();

  if (!resuming) {
    push({ journal: 'fringe', version: JOURNAL_VERSION, ...header });
    sync();
  }

  return {
    dir,
    file,
    input(input) {
      push(input.kind === 'reading' ? readingRecord(input) : { k: 'i', t: input.kind === 'fault' ? input.arrivalS : input.timeS, input });
    },
    event(event) {
      push({ k: 'e', event });
      if (SYNCED_EVENTS.has(event.type)) sync();
    },
    flush,
    sync,
    writeFile(name, text) {
      const target = join(dir, name);
      const temp = `${target}.tmp-${process.pid}`;
      writeFileSync(temp, text);
      const tfd = openSync(temp, 'r');
      fsyncSync(tfd);
      closeSync(tfd);
      renameSync(temp, target);
    },
    close() {
      if (closed) return;
      clearInterval(timer);
      sync();
      closed = true;
      closeSync(fd);
    },
  };
}
