/** A tiny benchmark harness: repeat a body until a time budget is spent, report the rate. */

export interface BenchResult {
  name: string;
  value: number;
  unit: string;
  /** Free-form context printed beside the figure (not part of the figure). */
  note?: string;
}

export interface Benchmark {
  /** Dotted name; its first part is the group `npm run bench -- GROUP` selects. */
  name: string;
  run(): BenchResult[] | Promise<BenchResult[]>;
}

/**
 * Calls `body` repeatedly for about `seconds` after `warmup` calls and returns the mean
 * seconds per call and the count.
 */
export function timeLoop(body: () => void, seconds = 2, warmup = 20): { secondsPerCall: number; calls: number } {
  for (let i = 0; i < warmup; i++) body();
  let calls = 0;
  const start = process.hrtime.bigint();
  const budget = BigInt(Math.round(seconds * 1e9));
  let elapsed: bigint;
  do {
    body();
    calls++;
    elapsed = process.hrtime.bigint() - start;
  } while (elapsed < budget);
  return { secondsPerCall: Number(elapsed) / 1e9 / calls, calls };
}
