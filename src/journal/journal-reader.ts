/** Reading a journal back, up to its last complete line (a crash may cut the last one short). */
import { readFileSync } from 'node:fs';
import { JOURNAL_VERSION, parseRecord, type JournalHeader, type JournalRecord } from './journal-format.ts';

export interface JournalContents {
  header: JournalHeader;
  records: JournalRecord[];
  /** True when the file ended inside a line (the part after the last newline was dropped). */
  truncated: boolean;
}

export class JournalError extends Error {
  override name = 'JournalError';
}

export function readJournal(file: string): JournalContents {
  let text: string;
  try {
    text = readFileSync(file, 'utf8');
  } catch (error) {
    throw new JournalError(`${file} cannot be read: ${(error as NodeJS.ErrnoException).code === 'ENOENT' ? 'no such file' : (error as Error).message}`);
  }
  const end = text.lastIndexOf('\n');
  const truncated = end !== text.length - 1;
  const lines = (end < 0 ? '' : text.slice(0, end)).split('\n');
  const first = lines[0];
  if (first === undefined || first === '') throw new JournalError(`${file} holds no complete line`);
  const header = parseRecord(first) as JournalHeader;
  if (header.journal !== 'fringe') throw new JournalError(`${file} is not a fringe journal`);
  if (header.version !== JOURNAL_VERSION) {
    throw new JournalError(`${file} is journal version ${header.version}; this fringe reads version ${JOURNAL_VERSION}`);
  }
  const records: JournalRecord[] = [];
  for (let i = 1; i < lines.length; i++) {
    const line = lines[i] as string;
    if (line === '') continue;
    try {
      records.push(parseRecord(line) as JournalRecord);
    } catch {
      throw new JournalError(`${file} line ${i + 1} is not valid JSON`);
    }
  }
  return { header, records, truncated };
}
