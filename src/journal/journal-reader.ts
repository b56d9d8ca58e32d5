/**
 * Reading a journal back as a stream: the file is read in chunks and its records yielded one by
 * one, so no string ever holds the file (a JavaScript string stops near 512 MiB) and a caller
 * that does not keep the records never holds them all. A crash may cut the last line short: it
 * is dropped, and said. A damaged line inside (a torn write a resumed run wrote after, junk, a
 * byte changed, a line lost or repeated: each line's check sees it) is skipped and counted, and
 * the reader says which lines it skipped; the lines after it are read on.
 */
import { closeSync, openSync, readSync, statSync } from 'node:fs';
import { describeFileError } from '../files/writable-folder.ts';
import { headerProblem, isJournalRecord, parseRecord, unsealLine, type JournalHeader, type JournalRecord } from './journal-format.ts';

export interface JournalReadOptions {
  /** Bytes read from the file at a time (default 1 MiB). */
  chunkBytes?: number;
  /** A line longer than this is damaged and skipped without being held (default 16 MiB). */
  maxLineBytes?: number;
}

export interface DamagedLine {
  /** 1-based line number in the file. */
  line: number;
  /** `altered`: its check fails, or it lost it; `out of place`: its number is not after the last line read (repeated, moved). */
  reason: 'not JSON' | 'not a journal record' | 'too long' | 'altered' | 'out of place';
}

/** Lines lost (their numbers missing, no damaged line in their place) before a line read. */
export interface LostLines {
  /** 1-based line number in the file of the line after them. */
  line: number;
  count: number;
}

/** What a pass over the records found; complete once the records have been read to the end. */
export interface JournalReadReport {
  /** True when the file ended inside a line (the part after the last newline was dropped). */
  truncated: boolean;
  /** The line the file ends inside (1-based), or null. */
  truncatedLine: number | null;
  damagedLines: number;
  /** The first few damaged lines. */
  firstDamaged: DamagedLine[];
  /** Lines whose numbers are missing, in all, and the first few places. */
  lostLines: number;
  firstLost: LostLines[];
}

/** A journal whose header has been read and checked; its records are read as they are asked for. */
export interface JournalStream {
  readonly file: string;
  readonly header: JournalHeader;
  /** The records in file order, read afresh on each iteration (the report starts over with it). */
  readonly records: Iterable<JournalRecord>;
  readonly report: JournalReadReport;
}

export interface JournalContents extends JournalReadReport {
  header: JournalHeader;
  records: JournalRecord[];
}

export class JournalError extends Error {
  override name = 'JournalError';
}

const FIRST_DAMAGED_KEPT = 5;
/** A header is a few hundred bytes; a first line longer than this is no header. */
const MAX_HEADER_BYTES = 1 << 20;

/** Opens `file` and reads its header; throws a JournalError naming the file when it is no journal of this version. */
export function openJournal(file: string, options: JournalReadOptions = {}): JournalStream {
  const chunkBytes = options.chunkBytes ?? 1 << 20;
  const maxLineBytes = options.maxLineBytes ?? 16 << 20;
  if (!(Number.isInteger(chunkBytes) && chunkBytes > 0)) throw new RangeError(`chunkBytes must be a positive integer, got ${chunkBytes}`);
  const { header, sealed, altered } = readHeader(file, Math.min(chunkBytes, MAX_HEADER_BYTES));
  const report: JournalReadReport = { truncated: false, truncatedLine: null, damagedLines: 0, firstDamaged: [], lostLines: 0, firstLost: [] };
  const damaged = (line: number, reason: DamagedLine['reason']): void => {
    report.damagedLines++;
    if (report.firstDamaged.length < FIRST_DAMAGED_KEPT) report.firstDamaged.push({ line, reason });
  };
  function* records(): Generator<JournalRecord> {
    report.truncated = false;
    report.truncatedLine = null;
    report.damagedLines = 0;
    report.firstDamaged = [];
    report.lostLines = 0;
    report.firstLost = [];
    if (altered) damaged(1, 'altered');
    // Once lines carry checks, a line without one has lost it.
    let checked = sealed;
    /** The number the next line should carry, and the damaged lines since the last one read (they account for numbers missing). */
    let expected = 1;
    let damagedSince = 0;
    const tail = { bytes: 0, line: 0 };
    for (const { number, text } of scanLines(file, chunkBytes, maxLineBytes, tail)) {
      if (number === 1) continue;
      // The writer writes no empty line: in a checked journal one is what is left of a line.
      if (text === '' && !checked) continue;
      const seal = text === null || text === '' ? null : unsealLine(text);
      checked ||= seal !== null;
      let reason: DamagedLine['reason'] | null = null;
      let value: unknown;
      if (text === null) reason = 'too long';
      else if (text === '') reason = 'not JSON';
      else if (seal && !seal.intact) reason = 'altered';
      else if (seal && seal.seq < expected) reason = 'out of place';
      else {
        try {
          value = parseRecord(seal?.body ?? text);
          if (!isJournalRecord(value)) reason = 'not a journal record';
          else if (!seal && checked) reason = 'altered';
        } catch {
          reason = 'not JSON';
        }
      }
      if (reason !== null) {
        damaged(number, reason);
        damagedSince++;
        continue;
      }
      if (seal) {
        const lost = seal.seq - expected - damagedSince;
        if (lost > 0) {
          report.lostLines += lost;
          if (report.firstLost.length < FIRST_DAMAGED_KEPT) report.firstLost.push({ line: number, count: lost });
        }
        expected = seal.seq + 1;
      }
      damagedSince = 0;
      yield value as JournalRecord;
    }
    report.truncated = tail.bytes > 0;
    report.truncatedLine = tail.bytes > 0 ? tail.line : null;
  }
  return { file, header, records: { [Symbol.iterator]: records }, report };
}

/** The whole journal in memory (small journals, tests); `openJournal` streams. */
export function readJournal(file: string, options: JournalReadOptions = {}): JournalContents {
  const journal = openJournal(file, options);
  const records = [...journal.records];
  return { header: journal.header, records, ...journal.report };
}

const DAMAGE_WORDS: Record<DamagedLine['reason'], string> = {
  'not JSON': 'not JSON',
  'not a journal record': 'not a journal record',
  'too long': 'too long',
  altered: 'altered: its check fails',
  'out of place': 'repeated or out of place',
};

/** One line saying which damaged lines were skipped, which are missing and where the file was cut off, or null when none. */
export function describeDamage(file: string, report: JournalReadReport): string | null {
  const parts: string[] = [];
  const n = report.damagedLines;
  if (n === 0 && report.lostLines === 0 && report.truncatedLine === null) return null;
  if (n > 0) {
    const lines = report.firstDamaged.map((d) => `${d.line} (${DAMAGE_WORDS[d.reason]})`).join(', ');
    const more = n > report.firstDamaged.length ? ', …' : '';
    parts.push(`skipped ${n} damaged line${n === 1 ? '' : 's'}: line${n === 1 ? '' : 's'} ${lines}${more}`);
  }
  if (report.lostLines > 0) {
    const places = report.firstLost.map((l) => `${l.count} before line ${l.line}`).join(', ');
    parts.push(`${report.lostLines} line${report.lostLines === 1 ? '' : 's'} missing (${places}${report.lostLines > report.firstLost.reduce((n, l) => n + l.count, 0) ? ', …' : ''})`);
  }
  if (report.truncatedLine !== null) parts.push(`line ${report.truncatedLine} is cut off (the file ends inside it): read to the line before`);
  return `${file}: ${parts.join('; ')}`;
}

/**
 * The header of `file`, checked; a JournalError in one sentence naming the file otherwise. With
 * it whether the header carries a check, and whether that check fails (the header is then used,
 * and reported as damaged).
 */
function readHeader(file: string, chunkBytes: number): { header: JournalHeader; sealed: boolean; altered: boolean } {
  let first: string | null | undefined;
  try {
    // A pipe would block the open (or the reads) for ever, and a device never end: files only.
    const stat = statSync(file);
    if (!stat.isFile()) throw new JournalError(`${file} cannot be read: ${stat.isDirectory() ? 'it is a folder' : 'it is not a regular file'}`);
    for (const line of scanLines(file, chunkBytes, MAX_HEADER_BYTES, { bytes: 0 }, true)) {
      first = line.text;
      break;
    }
  } catch (error) {
    if (error instanceof JournalError) throw error;
    const code = (error as NodeJS.ErrnoException).code;
    const why = code === 'ENOENT' ? 'no such file' : (describeFileError(error) ?? (error as Error).message);
    throw new JournalError(`${file} cannot be read: ${why}`);
  }
  if (first === undefined || first === '') throw new JournalError(statSync(file).size === 0 ? `${file} is empty: it holds no journal` : `${file} holds no complete line`);
  let value: unknown = null;
  const seal = first === null ? null : unsealLine(first);
  if (first !== null) {
    try {
      value = parseRecord(seal?.body ?? first);
    } catch {
      // Not JSON: no header (said below without quoting it: it may be binary).
    }
  }
  const problem = headerProblem(value);
  if (problem) throw new JournalError(`${file} ${problem}`);
  return { header: value as JournalHeader, sealed: seal !== null, altered: seal !== null && !(seal.intact && seal.seq === 0) };
}

/**
 * The complete lines of `file`, numbered from 1, read `chunkBytes` at a time. Lines are cut on
 * the newline byte before decoding (UTF-8 never uses it inside a character), so a character split
 * across chunks decodes whole. A line over `maxLineBytes` is yielded as null and not held (or ends
 * the scan, `stopAtLongLine`: a header is never that long, so no need to read on). The bytes
 * after the last newline are not a line: their count is left in `tail.bytes`.
 */
function* scanLines(
  file: string,
  chunkBytes: number,
  maxLineBytes: number,
  tail: { bytes: number; line?: number },
  stopAtLongLine = false,
): Generator<{ number: number; text: string | null }> {
  const fd = openSync(file, 'r');
  try {
    const chunk = Buffer.allocUnsafe(chunkBytes);
    let parts: Buffer[] = [];
    let partBytes = 0;
    let number = 1;
    let position = 0;
    for (;;) {
      const n = readSync(fd, chunk, 0, chunkBytes, position);
      if (n === 0) break;
      position += n;
      let start = 0;
      for (let nl = chunk.indexOf(10, start); nl >= 0 && nl < n; nl = chunk.indexOf(10, start)) {
        const length = partBytes + nl - start;
        let text: string | null = null;
        if (length <= maxLineBytes) {
          text = parts.length === 0 ? chunk.toString('utf8', start, nl) : Buffer.concat([...parts, chunk.subarray(start, nl)]).toString('utf8');
        }
        yield { number, text };
        number++;
        parts = [];
        partBytes = 0;
        start = nl + 1;
      }
      if (start < n) {
        partBytes += n - start;
        // Past the limit the line's bytes are only counted (it is yielded as null).
        if (partBytes <= maxLineBytes) parts.push(Buffer.from(chunk.subarray(start, n)));
        else if (stopAtLongLine) {
          yield { number, text: null };
          return;
        } else parts = [];
      }
    }
    tail.bytes = partBytes;
    tail.line = number;
  } finally {
    closeSync(fd);
  }
}
