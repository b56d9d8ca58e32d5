/**
 * A history of at most `max` points that keeps an even density over its whole span: when full
 * it drops every other point and from then on takes only every second new one (then fourth, …),
 * so old and new stretches are thinned alike. The newest point is always kept as the tail,
 * whether or not its turn had come.
 */
export class BoundedHistory<T> {
  private points: T[] = [];
  private tail: T | undefined;
  private stride = 1;
  private seen = 0;

  constructor(private readonly max: number) {
    if (!Number.isInteger(max) || max < 2) throw new RangeError(`max must be a whole number ≥ 2, got ${max}`);
  }

  push(point: T): void {
    if (this.seen % this.stride === 0) {
      this.points.push(point);
      this.tail = undefined;
      if (this.points.length >= this.max) {
        this.points = this.points.filter((_p, i) => i % 2 === 0);
        this.stride *= 2;
        this.seen = 0;
      }
    } else {
      this.tail = point;
    }
    this.seen++;
  }

  values(): T[] {
    return this.tail === undefined ? this.points.slice() : [...this.points, this.tail];
  }

  get length(): number {
    return this.points.length + (this.tail === undefined ? 0 : 1);
  }

  clear(): void {
    this.points = [];
    this.tail = undefined;
    this.stride = 1;
    this.seen = 0;
  }
}
