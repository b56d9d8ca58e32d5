import { closeSync, openSync, statSync, writeFileSync, writeSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import { fileErrorReason, makeWritableFolder } from '../files/writable-folder.ts';
import { isHostName } from '../server/host-rule.ts';

/** An error the command line reports as one sentence on stderr, with its exit code. */
export class CliError extends Error {
  override name = 'CliError';
  constructor(
    message: string,
    /** 2: the command was used wrongly; 1: the input was refused or the work failed. */
    readonly exitCode: 1 | 2 = 2,
  ) {
    super(message);
  }
}

/** Parses a finite number option, naming the option when it is not one. */
export function numberOption(name: string, value: string | undefined): number | undefined {
  if (value === undefined) return undefined;
  const n = Number(value);
  if (value.trim() === '' || !Number.isFinite(n)) throw new CliError(`--${name} expects a number, got "${value}"`);
  return n;
}

/** The options of many seeded simulated runs (study, what-if): how many, the first seed, the worker threads. */
export function seededRunsOptions(values: { runs?: string | undefined; seed?: string | undefined; workers?: string | undefined }, defaultRuns: number, maxRuns: number): { runs: number; firstSeed: number; workers: number | undefined } {
  const runs = numberOption('runs', values.runs) ?? defaultRuns;
  if (!Number.isInteger(runs) || runs < 1 || runs > maxRuns) throw new CliError(`--runs must be a whole number from 1 to ${maxRuns}, got ${runs}`);
  const firstSeed = numberOption('seed', values.seed) ?? 1;
  if (!Number.isInteger(firstSeed) || firstSeed < 0) throw new CliError(`--seed must be a whole number, got ${firstSeed}`);
  const workers = numberOption('workers', values.workers);
  if (workers !== undefined && (!Number.isInteger(workers) || workers < 1 || workers > 64)) throw new CliError(`--workers must be from 1 to 64, got ${workers}`);
  return { runs, firstSeed, workers };
}

/** How optical layers are cut on the command line: the model fit unless --estimator plain asks for the plain rules. */
export function estimatorOption(value: string | undefined, fallback: 'fit' | 'plain' = 'fit'): 'fit' | 'plain' {
  const estimator = value ?? fallback;
  if (estimator !== 'plain' && estimator !== 'fit') throw new CliError(`--estimator must be fit or plain, got "${estimator}"`);
  return estimator;
}

/** The names given with `--allow-host` (repeated, or separated by commas), each checked. */
export function allowHostOption(values: readonly string[] | undefined): string[] {
  const names = (values ?? []).flatMap((v) => v.split(',')).map((v) => v.trim()).filter((v) => v !== '');
  const bad = names.find((name) => !isHostName(name));
  if (bad !== undefined) throw new CliError(`--allow-host expects a host name, NAME or NAME:PORT (such as coater-pc.lab.example), got "${bad}"`);
  return names;
}

/** Writes a file the user asked for (creating its folder), or says in one sentence why not. */
export function writeOutputFile(file: string, text: string): void {
  try {
    makeWritableFolder(dirname(resolve(file)));
    writeFileSync(file, text);
  } catch (error) {
    throw new CliError(`cannot write ${file}: ${fileErrorReason(error)}`, 1);
  }
}

/** A file the user asked for, written piece by piece; a failure is one sentence naming it. */
export function openOutputFile(file: string): { write(text: string): void; close(): void } {
  const fail = (error: unknown): never => {
    throw new CliError(`cannot write ${file}: ${fileErrorReason(error)}`, 1);
  };
  let fd = -1;
  try {
    makeWritableFolder(dirname(resolve(file)));
    fd = openSync(file, 'w');
  } catch (error) {
    fail(error);
  }
  return {
    write(text) {
      try {
        writeSync(fd, text);
      } catch (error) {
        fail(error);
      }
    },
    close() {
      try {
        closeSync(fd);
      } catch {
        // Already reported by the write that failed, or nothing left to lose.
      }
    },
  };
}

/**
 * The folder a `--NAME DIR` option names, made now (or refused in one sentence) so that a run
 * never starts towards a place it cannot be kept.
 */
export function outputFolderOption(name: string, dir: string): string {
  if (dir.trim() === '') throw new CliError(`--${name} needs a folder name`);
  try {
    makeWritableFolder(dir);
  } catch (error) {
    throw new CliError(`--${name} ${dir}: ${fileErrorReason(error)}`, 1);
  }
  return dir;
}

/** The file a `--NAME FILE` option names, checked before a long job: its folder made, the file not a folder. */
export function outputFileOption(name: string, file: string): string {
  if (file.trim() === '') throw new CliError(`--${name} needs a file name`);
  try {
    makeWritableFolder(dirname(resolve(file)));
    if (statSync(file, { throwIfNoEntry: false })?.isDirectory()) throw new CliError(`--${name} ${file}: it is a folder; name a file`, 1);
  } catch (error) {
    if (error instanceof CliError) throw error;
    throw new CliError(`--${name} ${file}: ${fileErrorReason(error)}`, 1);
  }
  return file;
}

/** The SVG file a `--plot FILE.svg` option names: the name must say what is written, then as {@link outputFileOption}. */
export function plotFileOption(file: string): string {
  if (file.trim() !== '' && !/\.svg$/i.test(file)) {
    throw new CliError(`--plot writes an SVG drawing: name a file ending in .svg, got "${file}"`);
  }
  return outputFileOption('plot', file);
}
