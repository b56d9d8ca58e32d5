/**
 * Writing a run to `runs/<id>/`: the journal is appended in batches, flushed at least once a
 * second and synced to disk at every cut and alert, so a crash loses at most the last second of
 * readings and never a decision. The summary is written atomically (temp file, then rename).
 *
 * A failed write (a full disk, an I/O error) never stops the run: the lines stay buffered and
 * are retried at the next flush, the failure is reported once through `onWriteError` and the
 * recovery through `onWriteRecovered`. While the disk refuses, the buffer is bounded: the oldest
 * readings go first, counted; events are never dropped.
 */
import { closeSync, existsSync, fsyncSync, openSync, readSync, renameSync, rmSync, statSync, writeFileSync, writeSync } from 'node:fs';
import { join } from 'node:path';
import { fileErrorReason, makeWritableFolder } from '../files/writable-folder.ts';
import type { RunEvent } from '../pipeline/events.ts';
import type { PipelineInput } from '../pipeline/types.ts';
import { createInputRecorder, JOURNAL_VERSION, sealLine, stringifyRecord, unsealLine, type JournalHeader, type JournalRecord } from './journal-format.ts';

export interface JournalWriter {
  readonly dir: string;
  readonly file: string;
  /** Records an input: readings in compact form, others whole. Never throws. */
  input(input: PipelineInput): void;
  /** Records a decision; cuts, alerts and the run's end are synced to disk at once. Never throws. */
  event(event: RunEvent): void;
  /** Writes what is buffered. Never throws: a failure keeps the lines for the next flush. */
  flush(): void;
  /** Writes and syncs to disk what is buffered. Never throws. */
  sync(): void;
  /** Writes a file beside the journal atomically; throws a JournalWriteError naming it when it cannot. */
  writeFile(name: string, text: string): void;
  /** Flushes, syncs and closes; says what could not be written. */
  close(): JournalLoss;
}

/** What the journal holds back or has lost while writes fail. */
export interface JournalLoss {
  /** Bytes buffered and not yet written. */
  pendingBytes: number;
  /** Readings dropped to keep the buffer bounded, since the writer opened. */
  droppedReadings: number;
}

/** Writes `text` at the file's end from `offset`; returns the bytes written (may be fewer). */
export type JournalWrite = (fd: number, data: Buffer, offset: number) => number;

export interface JournalWriterOptions {
  /** Flush at least this often, ms (default 1000). */
  flushIntervalMs?: number;
  /** Flush when this many bytes are waiting (default 256 KiB). */
  maxBufferBytes?: number;
  /** While writes fail, keep at most this many bytes; the oldest readings are dropped past it (default 64 MiB). */
  maxPendingBytes?: number;
  /**
   * Appending to an existing journal: the resumed run's time, s. The writer then starts on a
   * fresh line (a crash may have left half of one) and records a `resumed` mark. Without it, an
   * existing journal is refused: it belongs to another run.
   */
  resumedAtS?: number;
  /** The first failed write of an episode (later failures in it are not reported again). */
  onWriteError?: (error: Error, loss: JournalLoss) => void;
  /** The first write that succeeds after a failure: everything held back is on disk. */
  onWriteRecovered?: (loss: JournalLoss) => void;
  /** The write itself (default fs.writeSync); tests inject failures here. */
  write?: JournalWrite;
  /** The sync to disk (default fs.fsyncSync). */
  fsync?: (fd: number) => void;
}

/** What sealing adds to a line at most: `,"z":4294967295` and the newline. */
const CHECK_BYTES = 16;

const SYNCED_EVENTS = new Set<RunEvent['type']>(['cut', 'alert', 'layer-finished', 'run-finished', 'mode-changed']);

interface PendingLine {
  /** A record's JSON text, sealed with its check as it is written (readings dropped before then break no chain); or raw text. */
  readonly text: string;
  readonly raw?: boolean;
  /** Its bytes on disk (a sealed line's check counted at its longest). */
  readonly bytes: number;
  /** Readings may be dropped when the buffer overflows; nothing else may. */
  readonly reading: boolean;
}

/**
 * Creates `dir` (and parents) and opens its journal for appending, first line the header. An
 * existing journal is appended to only when resuming (`resumedAtS`): it keeps its one header.
 * Opening throws (a JournalWriteError, one sentence) when the journal cannot be started at all.
 */
export function createJournalWriter(
  dir: string,
  header: Omit<JournalHeader, 'journal' | 'version'>,
  options: JournalWriterOptions = {},
): JournalWriter {
  const file = join(dir, 'journal.ndjson');
  const write: JournalWrite = options.write ?? ((fd, data, offset) => writeSync(fd, data, offset));
  const fsync = options.fsync ?? fsyncSync;
  const maxBytes = options.maxBufferBytes ?? 256 * 1024;
  const maxPendingBytes = options.maxPendingBytes ?? 64 * 1024 * 1024;
  let fd: number;
  let resuming: boolean;
  let endsMidLine = false;
  /** The number the next line written carries (journal-format.ts): the header 0. */
  let seq = 0;
  try {
    makeWritableFolder(dir);
    resuming = existsSync(file) && statSync(file).size > 0;
    if (resuming && options.resumedAtS === undefined) throw new Error('it already holds a journal of another run');
    fd = openSync(file, 'a+');
    if (resuming) {
      const size = statSync(file).size;
      endsMidLine = lastByte(fd, size) !== 0x0a;
      seq = nextSeq(fd, size);
    }
  } catch (error) {
    throw new JournalWriteError(`${file} cannot be opened for the journal: ${fileErrorReason(error)}`);
  }

  let queue: PendingLine[] = [];
  let queueBytes = 0;
  /** The rest of a line a failed write cut short: written first, never dropped. */
  let partial: Buffer | null = null;
  let droppedReadings = 0;
  /** What is failing now: writes (lines held back) or only syncs (lines written, maybe not on disk). */
  let failing: 'write' | 'sync' | null = null;
  /** While opening, failures are thrown, not reported. */
  let opening = true;
  let firstError: Error | undefined;
  let closed = false;
  const recordInput = createInputRecorder();

  const loss = (): JournalLoss => ({ pendingBytes: queueBytes + (partial?.length ?? 0), droppedReadings });
  const report = (callback: (() => void) | undefined): void => {
    try {
      callback?.();
    } catch {
      // A failing reporter must not stop the journal (nor the run).
    }
  };
  const failed = (cause: unknown, what: 'write' | 'sync'): void => {
    const error = cause instanceof Error ? cause : new Error(String(cause));
    firstError ??= error;
    const known = failing !== null;
    if (failing !== 'write') failing = what;
    if (!known && !opening) report(() => options.onWriteError?.(error, loss()));
  };
  const recovered = (): void => {
    failing = null;
    report(() => options.onWriteRecovered?.(loss()));
  };

  /** Writes `data` whole, or throws with `written` bytes of it on disk. */
  const writeAll = (data: Buffer): void => {
    let written = 0;
    try {
      while (written < data.length) written += write(fd, data, written);
    } catch (error) {
      throw new WriteFailure(error, written);
    }
  };

  /** Writes what is buffered; true when nothing is left. */
  const writeOut = (): boolean => {
    const rest = partial;
    if (rest) {
      try {
        writeAll(rest);
        partial = null;
      } catch (failure) {
        partial = rest.subarray((failure as WriteFailure).written);
        failed((failure as WriteFailure).reason, 'write');
        return false;
      }
    }
    if (queue.length === 0) return true;
    // Numbered now, in the order written: readings dropped before then leave no gap.
    let next = seq;
    const texts = queue.map((l) => (l.raw ? l.text : `${sealLine(l.text, next++)}\n`));
    const numbered = (count: number): number => queue.slice(0, count).filter((l) => !l.raw).length;
    try {
      writeAll(Buffer.from(texts.join('')));
      seq += numbered(queue.length);
      queue = [];
      queueBytes = 0;
      return true;
    } catch (failure) {
      // Keep the lines not written whole; the rest of the one cut short goes first next time.
      let written = (failure as WriteFailure).written;
      let done = 0;
      while (done < queue.length && written >= Buffer.byteLength(texts[done] as string)) {
        written -= Buffer.byteLength(texts[done] as string);
        queueBytes -= (queue[done] as PendingLine).bytes;
        done++;
      }
      if (written > 0) {
        partial = Buffer.from(texts[done] as string).subarray(written);
        queueBytes -= (queue[done] as PendingLine).bytes;
        done++;
      }
      seq += numbered(done);
      queue = queue.slice(done);
      failed((failure as WriteFailure).reason, 'write');
      return false;
    }
  };

  const flush = (): void => {
    if (closed) return;
    if (writeOut() && failing === 'write') recovered();
  };
  const sync = (): void => {
    if (closed) return;
    flush();
    if (failing === 'write') return;
    try {
      fsync(fd);
      if (failing === 'sync') recovered();
    } catch (error) {
      // The lines reached the system but may not reach the disk: say so; the next sync may do.
      failed(error, 'sync');
    }
  };

  /** Past the bound while writes fail, drop the oldest readings (down to 7/8 of it, so rarely). */
  const bound = (): void => {
    if (queueBytes <= maxPendingBytes) return;
    const target = (maxPendingBytes * 7) / 8;
    const kept: PendingLine[] = [];
    for (const line of queue) {
      if (line.reading && queueBytes > target) {
        queueBytes -= line.bytes;
        droppedReadings++;
      } else kept.push(line);
    }
    queue = kept;
  };

  const push = (record: JournalRecord | JournalHeader, reading: boolean): void => {
    if (closed) return;
    const text = stringifyRecord(record);
    const bytes = Buffer.byteLength(text) + CHECK_BYTES;
    queue.push({ text, bytes, reading });
    queueBytes += bytes;
    if (failing === 'write') bound();
    // While the disk refuses, retry at the flush timer and at syncs, not at every reading.
    else if (queueBytes >= maxBytes) flush();
  };

  const timer = setInterval(flush, options.flushIntervalMs ?? 1000);
  timer.unref();

  if (!resuming) push({ journal: 'fringe', version: JOURNAL_VERSION, ...header }, false);
  else {
    // A crash may have cut the last line short: start on a fresh one (the half line is then one
    // damaged line that readers skip), and note where the run was taken up again.
    if (endsMidLine) {
      queue.push({ text: '\n', raw: true, bytes: 1, reading: false });
      queueBytes += 1;
    }
    const atS = options.resumedAtS as number;
    push({ k: 'm', t: Number.isFinite(atS) ? atS : 0, mark: 'resumed', at: header.startedAt, meta: header.meta }, false);
  }
  sync();
  opening = false;
  if (failing) {
    clearInterval(timer);
    closeQuietly(fd);
    throw new JournalWriteError(`${file} cannot be written: ${firstError?.message ?? 'unknown error'}`);
  }

  return {
    dir,
    file,
    input(input) {
      // Readings and spectra may be dropped when the disk refuses for long; a grid never (its spectra need it).
      for (const record of recordInput(input)) push(record, record.k === 'r' || record.k === 's');
    },
    event(event) {
      push({ k: 'e', event }, false);
      if (SYNCED_EVENTS.has(event.type)) sync();
    },
    flush,
    sync,
    writeFile(name, text) {
      const target = join(dir, name);
      const temp = `${target}.tmp-${process.pid}`;
      try {
        writeFileSync(temp, text);
        const tfd = openSync(temp, 'r');
        try {
          fsyncSync(tfd);
        } finally {
          closeSync(tfd);
        }
        renameSync(temp, target);
      } catch (error) {
        try {
          rmSync(temp, { force: true });
        } catch {
          // A temp file that cannot be removed is only clutter.
        }
        throw new JournalWriteError(`${target} cannot be written: ${fileErrorReason(error)}`);
      }
    },
    close() {
      if (closed) return loss();
      clearInterval(timer);
      sync();
      closed = true;
      closeQuietly(fd);
      return loss();
    },
  };
}

/** The journal could not be opened or started: one sentence naming the file. */
export class JournalWriteError extends Error {
  override name = 'JournalWriteError';
}

/** A write that failed part-way: why, and how much of its data reached the file. */
class WriteFailure extends Error {
  constructor(
    readonly reason: unknown,
    readonly written: number,
  ) {
    super(reason instanceof Error ? reason.message : String(reason));
  }
}

/** "3.2 MiB held back, 1200 readings dropped", for a message. */
export function describeLoss(loss: JournalLoss): string {
  const held = `${(loss.pendingBytes / 1024).toFixed(0)} KiB held back`;
  return loss.droppedReadings > 0 ? `${held}, ${loss.droppedReadings} readings dropped` : held;
}

function lastByte(fd: number, size: number): number {
  const one = Buffer.alloc(1);
  return readSync(fd, one, 0, 1, size - 1) === 1 ? (one[0] as number) : -1;
}

/**
 * The number a line appended to the file carries: one past the last intact line's, read from the
 * end back (the last 64 KiB, else the last 16 MiB); 1 after a header alone (or a journal from
 * before the numbers). Not found, the file's size: more than any line's number, so the reader
 * reports a gap rather than taking the new lines for old ones repeated.
 */
function nextSeq(fd: number, size: number): number {
  for (const window of [64 << 10, (16 << 20) + 2]) {
    const length = Math.min(size, window);
    const bytes = Buffer.alloc(length);
    readSync(fd, bytes, 0, length, size - length);
    for (let end = length; end > 0; ) {
      const start = bytes.lastIndexOf(0x0a, end - 1);
      if (start < 0 && length < size) break; // the window starts inside a line: read a wider one
      if (start < 0) return 1; // the header
      const sealed = unsealLine(bytes.toString('utf8', start + 1, end));
      if (sealed?.intact) return sealed.seq + 1;
      end = start;
    }
  }
  return size;
}

function closeQuietly(fd: number): void {
  try {
    closeSync(fd);
  } catch {
    // Nothing more can be saved through it.
  }
}
