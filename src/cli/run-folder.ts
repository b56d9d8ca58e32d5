/** Finding a recorded run on disk for the commands that read one (replay, export, run --resume). */
import { existsSync, readFileSync, statSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { describeDamage, JournalError, openJournal, type JournalStream } from '../journal/journal-reader.ts';
import type { CommandIo } from './command-io.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { CliError } from './cli-error.ts';

export interface RecordedRun {
  /** The run folder. */
  dir: string;
  journalFile: string;
  /** Its header, read and checked; its records are read as they are asked for. */
  journal: JournalStream;
}

/** A run folder or its journal file, read; refused in one sentence when it is neither. */
export function readRecordedRun(target: string): RecordedRun {
  const isDir = existsSync(target) && statSync(target).isDirectory();
  const dir = isDir ? target : dirname(target);
  const journalFile = isDir ? join(target, 'journal.ndjson') : target;
  try {
    return { dir, journalFile, journal: openJournal(journalFile) };
  } catch (error) {
    if (error instanceof JournalError) throw new CliError(error.message, 1);
    throw error;
  }
}

/** Once the records have been read: one warning line on stderr if damaged lines were skipped. */
export function warnOfDamage(run: RecordedRun, io: CommandIo): void {
  const warning = describeDamage(run.journalFile, run.journal.report);
  if (warning) io.err(`warning: ${warning}`);
}

/** The recipe as run, kept beside the journal. */
export function readRecordedRecipe(dir: string, hint: string): ResolvedRecipe {
  const file = join(dir, 'recipe.json');
  if (!existsSync(file)) throw new CliError(`${dir} holds no recipe.json; ${hint}`, 1);
  return JSON.parse(readFileSync(file, 'utf8')) as ResolvedRecipe;
}
