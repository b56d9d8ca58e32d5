/** Finding a recorded run on disk for the commands that read one (replay, export, run --resume). */
import { existsSync, readFileSync, statSync } from 'node:fs';
import { dirname, join } from 'node:path';
import { describeDamage, JournalError, openJournal, type JournalReadReport, type JournalStream } from '../journal/journal-reader.ts';
import type { CommandIo } from './command-io.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { CliError } from './cli-error.ts';
import { fileErrorReason } from '../files/writable-folder.ts';

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

/**
 * Once the records have been read: one warning line on stderr naming the damaged, missing or cut
 * off lines, if any (`report`: what another pass over the journal found, as the run report's).
 */
export function warnOfDamage(run: RecordedRun, io: CommandIo, report: JournalReadReport = run.journal.report): void {
  const warning = describeDamage(run.journalFile, report);
  if (warning) io.err(`warning: ${warning}`);
}

/** The recipe as run, kept beside the journal; refused in one sentence when it is missing or damaged. */
export function readRecordedRecipe(dir: string, hint: string): ResolvedRecipe {
  const file = join(dir, 'recipe.json');
  if (!existsSync(file)) throw new CliError(`${dir} holds no recipe.json; ${hint}`, 1);
  let text: string;
  try {
    text = readFileSync(file, 'utf8');
  } catch (error) {
    throw new CliError(`${file} cannot be read: ${fileErrorReason(error)}; ${hint}`, 1);
  }
  let value: unknown;
  try {
    value = JSON.parse(text);
  } catch {
    throw new CliError(`${file} is damaged: it is not JSON; ${hint}`, 1);
  }
  // Written by fringe itself, so only its outline is checked: enough that nothing reads into a hole.
  const recipe = value as Partial<ResolvedRecipe> | null;
  if (recipe === null || typeof recipe !== 'object' || typeof recipe.name !== 'string' || !Array.isArray(recipe.layers) || recipe.layers.length === 0) {
    throw new CliError(`${file} is damaged: it is not a recipe as fringe records it; ${hint}`, 1);
  }
  return recipe as ResolvedRecipe;
}
