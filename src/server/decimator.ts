/**
 * Thinning a channel for the screen: at most `pointsPerS` points per second of run time,
 * whatever the instrument's rate. Readings are grouped into buckets of 1/pointsPerS s of run
 * time (and never across a change of `group`, e.g. the layer); each bucket becomes one point,
 * the mean of its time and of each value. A point is given out when the next bucket begins, or
 * on `flush()`. At or below `pointsPerS` readings per second every reading is its own point.
 */
export interface DecimatedPoint {
  readonly timeS: number;
  /** Means of the values pushed, in the order given. */
  readonly values: readonly number[];
  readonly group: number;
  /** Readings merged into the point. */
  readonly count: number;
}

export class Decimator {
  private readonly bucketS: number;
  private bucket = Number.NaN;
  private group = Number.NaN;
  private count = 0;
  private sumTimeS = 0;
  private readonly sums: number[];

  /**
   * @param pointsPerS points per second of run time (> 0)
   * @param width how many values each reading carries
   */
  constructor(pointsPerS: number, width: number) {
    if (!(pointsPerS > 0) || !Number.isFinite(pointsPerS)) throw new RangeError(`pointsPerS must be a positive number, got ${pointsPerS}`);
    if (!Number.isInteger(width) || width < 1) throw new RangeError(`width must be a whole number ≥ 1, got ${width}`);
    this.bucketS = 1 / pointsPerS;
    this.sums = new Array<number>(width).fill(0);
  }

  /** Adds a reading; returns the previous bucket's point when this reading starts a new one. */
  push(timeS: number, values: readonly number[], group: number): DecimatedPoint | null {
    const bucket = Math.floor(timeS / this.bucketS);
    let out: DecimatedPoint | null = null;
    if (this.count > 0 && (bucket !== this.bucket || group !== this.group)) out = this.flush();
    if (this.count === 0) {
      this.bucket = bucket;
      this.group = group;
    }
    this.count++;
    this.sumTimeS += timeS;
    for (let i = 0; i < this.sums.length; i++) this.sums[i] = (this.sums[i] as number) + (values[i] ?? Number.NaN);
    return out;
  }

  /** The point of the bucket in progress (null when empty); the next reading starts afresh. */
  flush(): DecimatedPoint | null {
    if (this.count === 0) return null;
    const n = this.count;
    const point: DecimatedPoint = { timeS: this.sumTimeS / n, values: this.sums.map((s) => s / n), group: this.group, count: n };
    this.count = 0;
    this.sumTimeS = 0;
    this.sums.fill(0);
    return point;
  }
}
