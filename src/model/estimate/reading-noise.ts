/**
 * The rms noise of a monitor's readings, measured from the readings themselves: the median of
 * the absolute second differences y[i+1] − 2y[i] + y[i−1]. A second difference removes a signal
 * that moves linearly between readings (at 10 Hz a layer's signal is straight over three
 * readings to far below the noise) and has variance 6σ² for white noise; the median leaves the
 * spikes and the odd step across a gap out (for a Gaussian, median |x| = 0.6745 σ_x).
 */

/** The median of |N(0, 1)| (derived: Φ⁻¹(0.75)). */
const MEDIAN_ABS_GAUSSIAN = 0.6744897501960817;

/** Second differences needed before the figure means anything (its rms is then about 10 %; 3 % from 2000). */
export const READING_NOISE_MIN = 200;

/**
 * The rms noise of `values` (readings in order, non-finite ones skipped), or NaN with fewer than
 * READING_NOISE_MIN second differences.
 */
export function readingNoise(values: ArrayLike<number>): number {
  const finite: number[] = [];
  for (let i = 0; i < values.length; i++) {
    const v = values[i] as number;
    if (Number.isFinite(v)) finite.push(v);
  }
  const count = finite.length - 2;
  if (count < READING_NOISE_MIN) return Number.NaN;
  const second = new Float64Array(count);
  for (let i = 0; i < count; i++) second[i] = Math.abs((finite[i + 2] as number) - 2 * (finite[i + 1] as number) + (finite[i] as number));
  second.sort();
  const mid = count >> 1;
  const median = count % 2 === 1 ? (second[mid] as number) : 0.5 * ((second[mid - 1] as number) + (second[mid] as number));
  return median / (MEDIAN_ABS_GAUSSIAN * Math.sqrt(6));
}
