import { mkdirSync, writeFileSync } from 'node:fs';
import { dirname, resolve } from 'node:path';

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

/** Writes a file the user asked for (creating its folder), or says in one sentence why not. */
export function writeOutputFile(file: string, text: string): void {
  try {
    mkdirSync(dirname(resolve(file)), { recursive: true });
    writeFileSync(file, text);
  } catch (error) {
    throw new CliError(`cannot write ${file}: ${(error as Error).message}`, 1);
  }
}
