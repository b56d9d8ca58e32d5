import { closeSync, mkdirSync, openSync, writeFileSync, writeSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
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
    mkdirSync(dirname(resolve(file)), { recursive: true });
    writeFileSync(file, text);
  } catch (error) {
    throw new CliError(`cannot write ${file}: ${(error as Error).message}`, 1);
  }
}

/** A file the user asked for, written piece by piece; a failure is one sentence naming it. */
export function openOutputFile(file: string): { write(text: string): void; close(): void } {
  const fail = (error: unknown): never => {
    throw new CliError(`cannot write ${file}: ${(error as Error).message}`, 1);
  };
  let fd = -1;
  try {
    mkdirSync(dirname(resolve(file)), { recursive: true });
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
