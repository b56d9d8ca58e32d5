/**
 * Step times of a long soak in fixed memory: a histogram of 0.25 µs bins up to 5 ms (anything
 * slower in the last bin, its exact maximum kept), for the whole soak and for the current window
 * (a wall-clock minute), whose p99 is kept when the window closes.
 */
const BIN_US = 0.25;
const BINS = 20_000;

class Histogram {
  readonly counts = new Float64Array(BINS);
  count = 0;

  add(us: number): void {
    const bin = Math.min(BINS - 1, Math.floor(us / BIN_US));
    this.counts[bin] = (this.counts[bin] ?? 0) + 1;
    this.count++;
  }

  /** The upper edge of the bin holding the p-quantile, µs (NaN when empty). */
  percentile(p: number): number {
    if (this.count === 0) return Number.NaN;
    const rank = Math.ceil(p * this.count);
    let seen = 0;
    for (let i = 0; i < BINS; i++) {
      seen += this.counts[i] ?? 0;
      if (seen >= rank) return (i + 1) * BIN_US;
    }
    return BINS * BIN_US;
  }

  clear(): void {
    this.counts.fill(0);
    this.count = 0;
  }
}

export class StepTimes {
  private readonly all = new Histogram();
  private readonly window = new Histogram();
  maxUs = 0;
  cutCount = 0;
  cutMaxUs = 0;
  /** The slowest cutting step's own cost: the least of its time and its re-runs'. */
  cutOwnMaxUs = 0;
  worstWindowP99 = 0;
  /** The p99 of each closed window, µs. */
  readonly windowP99s: number[] = [];

  get count(): number {
    return this.all.count;
  }

  /** One step's time, µs; for a step that cut, its own cost too (else null). */
  add(us: number, cutOwnUs: number | null): void {
    this.all.add(us);
    this.window.add(us);
    if (us > this.maxUs) this.maxUs = us;
    if (cutOwnUs !== null) {
      this.cutCount++;
      if (us > this.cutMaxUs) this.cutMaxUs = us;
      if (cutOwnUs > this.cutOwnMaxUs) this.cutOwnMaxUs = cutOwnUs;
    }
  }

  percentile(p: number): number {
    return this.all.percentile(p);
  }

  /** Ends the current window (a window with no steps is not counted). */
  closeWindow(): void {
    if (this.window.count === 0) return;
    const p99 = this.window.percentile(0.99);
    this.windowP99s.push(p99);
    if (p99 > this.worstWindowP99) this.worstWindowP99 = p99;
    this.window.clear();
  }
}
