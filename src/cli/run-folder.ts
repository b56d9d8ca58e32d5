/** Finding a recorded run on disk for the commands that read one (replay, export, run --resume). */
import { existsSync, readFileSync, statSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { JournalError, readJournal, type JournalContents } from '../journal/journal-reader.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { CliError } from './cli-error.ts';

export interface RecordedRun {
  /** The run folder. */
  dir: string;
  journalFile: string;
  journal: JournalContents;
}

/** A run folder or its journal file, read; refused in one sentence when it is neither. */
export function readRecordedRun(target: string): RecordedRun {
  const isDir = existsSync(target) && statSync(target).isDirectory();
  const dir = isDir ? target : dirname(target);
  const journalFile = isDir ? join(target, 'journal.ndjson') : target;
  try {
    return { dir, journalFile, journal: readJournal(journalFile) };
  } catch (error) {
    if (error instanceof JournalError) throw new CliError(error.message, 1);
    throw error;
  }
}

/** The recipe as run, kept beside the journal. */
export function readRecordedRecipe(dir: string, hint: string): ResolvedRecipe {
  const file = join(dir, 'recipe.json');
  if (!existsSync(file)) throw new CliError(`${dir} holds no recipe.json; ${hint}`, 1);
  return JSON.parse(readFileSync(file, 'utf8')) as ResolvedRecipe;
}
