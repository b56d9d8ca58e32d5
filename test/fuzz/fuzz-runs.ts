/**
 * The one knob for every property in test/fuzz: `FRINGE_FUZZ_RUNS` cases per property (CI leaves
 * it unset and gets {@link DEFAULT_FUZZ_RUNS}; `npm run fuzz` sets 100,000). Each property prints
 * how many cases it ran and how long they took, so a fuzz run leaves its figures in the log.
 */
import fc from 'fast-check';

/** Small enough that the whole folder adds well under a minute to `npm test` on two cores. */
export const DEFAULT_FUZZ_RUNS = 400;

function runsFromEnvironment(): number {
  const text = process.env.FRINGE_FUZZ_RUNS;
  if (text === undefined || text === '') return DEFAULT_FUZZ_RUNS;
  const runs = Number(text);
  if (!Number.isInteger(runs) || runs < 1) throw new Error(`FRINGE_FUZZ_RUNS must be a whole number of cases, at least 1 (got "${text}")`);
  return runs;
}

export const FUZZ_RUNS = runsFromEnvironment();

/**
 * A cap for one property's test, not a measure: generous per case, so that only a hang (or a
 * machine stopped outright) reaches it.
 */
export const FUZZ_TIMEOUT_MS = 120_000 + FUZZ_RUNS * 50;

function report(family: string, runs: number, startMs: number): void {
  const seconds = (performance.now() - startMs) / 1000;
  console.log(`fuzz ${family}: ${runs} cases in ${seconds.toFixed(1)} s`);
}

/** Runs `property` for {@link FUZZ_RUNS} cases (fast-check shrinks and reports its seed on failure). */
export function fuzz<T>(family: string, property: fc.IProperty<T>, parameters: fc.Parameters<T> = {}): void {
  const start = performance.now();
  fc.assert(property, { numRuns: FUZZ_RUNS, ...parameters });
  report(family, FUZZ_RUNS, start);
}

/** The same for an asynchronous property. */
export async function fuzzAsync<T>(family: string, property: fc.IAsyncProperty<T>, parameters: fc.Parameters<T> = {}): Promise<void> {
  const start = performance.now();
  await fc.assert(property, { numRuns: FUZZ_RUNS, ...parameters });
  report(family, FUZZ_RUNS, start);
}
