/**
 * What a recorded run tells the calibration, read from its journal in one pass: when each
 * layer's shutter really opened and closed (the shutter acknowledgements, else the commands),
 * the optical readings of each layer on a clock of its own growth, and the crystal's frequency
 * in the pause after each layer.
 *
 * A layer's growth clock u (0 at the opening, 1 at the close) is the crystal's: the fraction of
 * the layer's mass reached at the reading's time, read as 1/f (mass is linear in 1/f for a
 * matched film, the Z-match's first term; in f itself it bends by Δf/f, a few 1e-4 over a layer,
 * which bent the monitor curves and biased the index factors by as much). The crystal follows the real rate,
 * its fluctuations and its ramp, so the optical readings are placed along the layer's thickness
 * without a rate model; a layer without crystal readings falls back to the run time.
 */
import type { JournalRecord } from '../journal/journal-format.ts';
import type { ResolvedRecipe } from '../model/plan/recipe.ts';

/** Bins of a layer's optical readings kept while it grew, and after its close (as the controller's chip refit keeps). */
export const GROWTH_BINS = 60;
export const PAUSE_BINS = 6;

export interface LayerReadings {
  /** 0-based layer index in the recipe. */
  readonly index: number;
  readonly openS: number;
  readonly closeS: number;
  /** Bin means: run time (s), growth clock u (0..1) and its spread (sd) within the bin, signal, readings averaged. */
  readonly timesS: Float64Array;
  readonly clocks: Float64Array;
  readonly clockSpreads: Float64Array;
  readonly values: Float64Array;
  readonly counts: Float64Array;
  /** Whether u came from the crystal (else from the run time). */
  readonly crystalClock: boolean;
  /**
   * The layer's growth as the crystal saw it, in 1 s bins from the opening to the close: run
   * time (s) and the fraction of the layer's mass reached (u). Empty without a crystal clock.
   * With the layer's part thickness it gives the rate on the parts (chamber-profile.ts).
   */
  readonly growth: { readonly timesS: Float64Array; readonly fractions: Float64Array };
}

/** The crystal's mean frequency in a pause: before layer 1 (after = 0) or after layer `after`. */
export interface CrystalLevel {
  /** Layers deposited when it was read (0 = none). */
  readonly after: number;
  readonly frequencyHz: number;
  readonly count: number;
}

export interface RunData {
  readonly label: string;
  readonly recipe: ResolvedRecipe;
  readonly layers: readonly LayerReadings[];
  readonly levels: readonly CrystalLevel[];
  /** rms noise of one optical reading (fraction) and one crystal reading (Hz), from the readings themselves. */
  readonly opticalNoise: number;
  readonly crystalNoiseHz: number;
  /** The controller's own estimate of each layer's part thickness (a starting point), NaN where none. */
  readonly estimatedNm: readonly number[];
  /**
   * Per source, the shutter's delays as its acknowledgements showed them (acknowledged move time
   * − command time, s, opens and closes alike); empty for a chamber that acknowledges nothing.
   */
  readonly shutterDelaysS: Readonly<Record<string, readonly number[]>>;
  readonly warnings: readonly string[];
}

interface Interval {
  openS: number;
  closeS: number;
  /** Next layer's opening, or the end of the record. */
  endS: number;
}

/** A run the calibration cannot use, in one sentence. */
export class CalibrationDataError extends Error {
  override name = 'CalibrationDataError';
}

/** Reads what the calibration needs from a journal's records; refuses a run with no deposited layer (CalibrationDataError). */
export function collectRunData(label: string, recipe: ResolvedRecipe, records: Iterable<JournalRecord>): RunData {
  const K = recipe.layers.length;
  const opticalT: number[] = [];
  const opticalV: number[] = [];
  const crystalT: number[] = [];
  const crystalV: number[] = [];
  const commanded: { open: number[]; close: number[] } = { open: new Array<number>(K).fill(Number.NaN), close: new Array<number>(K).fill(Number.NaN) };
  const acked: { action: 'open' | 'close'; source: string; timeS: number }[] = [];
  const commandOrder: { layer: number; action: 'open' | 'close'; source: string; timeS: number }[] = [];
  const estimatedNm = new Array<number>(K).fill(Number.NaN);
  let lastS = 0;
  for (const record of records) {
    if (record.k === 'r') {
      if (!Number.isFinite(record.v) || !Number.isFinite(record.t)) continue;
      if (record.c === 'o') {
        opticalT.push(record.t);
        opticalV.push(record.v);
      } else {
        crystalT.push(record.t);
        crystalV.push(record.v);
      }
      lastS = Math.max(lastS, record.t);
    } else if (record.k === 'i') {
      const input = record.input;
      if (input.kind === 'shutter-ack' && input.confirmedBy !== 'sent') acked.push({ action: input.action, source: input.source, timeS: input.timeS });
    } else if (record.k === 'e') {
      const e = record.event;
      if (e.type === 'shutter' && e.command.layer >= 1 && e.command.layer <= K) {
        const list = commanded[e.command.action];
        const i = e.command.layer - 1;
        const delay = (recipe.layers[i] as ResolvedRecipe['layers'][number]).shutterDelayS;
        // The first open and the last close of a layer bound its growth.
        if (e.command.action === 'open' ? !Number.isFinite(list[i]) : true) list[i] = e.command.timeS + delay;
        commandOrder.push({ layer: e.command.layer, action: e.command.action, source: e.command.source, timeS: e.command.timeS });
      } else if (e.type === 'layer-finished' && e.layer >= 1 && e.layer <= K && Number.isFinite(e.estimatedNm)) {
        estimatedNm[e.layer - 1] = e.estimatedNm;
      }
    }
  }
  // Acknowledgements come in the order of the commands of their source: pair them up.
  const pending = new Map<string, { layer: number; action: 'open' | 'close'; timeS: number }[]>();
  for (const c of commandOrder) {
    const key = `${c.source}/${c.action}`;
    if (!pending.has(key)) pending.set(key, []);
    (pending.get(key) as { layer: number; action: 'open' | 'close'; timeS: number }[]).push(c);
  }
  const shutterDelaysS: Record<string, number[]> = {};
  const open = [...commanded.open];
  const close = [...commanded.close];
  const seenOpen = new Set<number>();
  for (const a of acked) {
    const command = pending.get(`${a.source}/${a.action}`)?.shift();
    if (!command) continue;
    (shutterDelaysS[a.source] ??= []).push(a.timeS - command.timeS);
    const i = command.layer - 1;
    if (a.action === 'open') {
      if (!seenOpen.has(i)) open[i] = a.timeS;
      seenOpen.add(i);
    } else close[i] = a.timeS;
  }

  const intervals: (Interval | null)[] = [];
  for (let i = 0; i < K; i++) {
    const o = open[i] as number;
    if (!Number.isFinite(o)) {
      intervals.push(null);
      continue;
    }
    let nextOpen = Number.POSITIVE_INFINITY;
    for (let j = i + 1; j < K; j++) {
      if (Number.isFinite(open[j])) {
        nextOpen = open[j] as number;
        break;
      }
    }
    const c = Math.min(Number.isFinite(close[i]) ? (close[i] as number) : lastS, nextOpen);
    intervals.push({ openS: o, closeS: c, endS: Math.min(nextOpen, lastS + 1e-9) });
  }
  const warnings: string[] = [];
  const finished = intervals.filter((v) => v !== null).length;
  if (finished === 0) throw new CalibrationDataError(`${label}: the journal records no layer that was deposited, so there is nothing to calibrate from`);
  if (finished < K) warnings.push(`${label}: ${K - finished} of ${K} layers were never opened; the calibration uses the ${finished} that were`);

  // Crystal levels in the pauses.
  const levels: CrystalLevel[] = [];
  const levelIn = (from: number, to: number, after: number): void => {
    let sum = 0;
    let n = 0;
    for (let j = lowerBound(crystalT, from); j < crystalT.length && (crystalT[j] as number) < to; j++) {
      sum += crystalV[j] as number;
      n++;
    }
    if (n > 0) levels.push({ after, frequencyHz: sum / n, count: n });
  };
  const firstOpen = intervals.find((v) => v !== null) as Interval;
  levelIn(Number.NEGATIVE_INFINITY, firstOpen.openS, 0);
  intervals.forEach((v, i) => {
    if (v && v.endS > v.closeS) levelIn(v.closeS, v.endS, i + 1);
  });

  // Optical readings of each layer on its growth clock, binned.
  const layers: LayerReadings[] = [];
  let clockFallbacks = 0;
  intervals.forEach((v, i) => {
    if (!v) return;
    const before = levelNear(crystalT, crystalV, v.openS, -1);
    const after = levelNear(crystalT, crystalV, v.closeS, +1);
    const crystalClock = Number.isFinite(before) && Number.isFinite(after) && Math.abs(before - after) > 1;
    if (!crystalClock) clockFallbacks++;
    const clockAt = (t: number): number => {
      if (t >= v.closeS) return 1;
      if (t <= v.openS) return 0;
      const u = crystalClock ? (1 / interpolate(crystalT, crystalV, t) - 1 / before) / (1 / after - 1 / before) : (t - v.openS) / (v.closeS - v.openS);
      return Math.min(1, Math.max(0, u));
    };
    const growing: number[] = [];
    const paused: number[] = [];
    for (let j = lowerBound(opticalT, v.openS); j < opticalT.length && (opticalT[j] as number) < v.endS; j++) ((opticalT[j] as number) < v.closeS ? growing : paused).push(j);
    const timesS: number[] = [];
    const clocks: number[] = [];
    const spreads: number[] = [];
    const values: number[] = [];
    const counts: number[] = [];
    for (const [group, bins] of [[growing, GROWTH_BINS], [paused, PAUSE_BINS]] as const) {
      const count = Math.min(bins, group.length);
      for (let b = 0; b < count; b++) {
        const from = Math.floor((b * group.length) / count);
        const to = Math.floor(((b + 1) * group.length) / count);
        let t = 0;
        let u = 0;
        let uu = 0;
        let y = 0;
        for (let k = from; k < to; k++) {
          const j = group[k] as number;
          const c = clockAt(opticalT[j] as number);
          t += opticalT[j] as number;
          u += c;
          uu += c * c;
          y += opticalV[j] as number;
        }
        const n = to - from;
        timesS.push(t / n);
        clocks.push(u / n);
        spreads.push(Math.sqrt(Math.max(0, uu / n - (u / n) ** 2)));
        values.push(y / (to - from));
        counts.push(to - from);
      }
    }
    const growthTimes: number[] = [];
    const growthFractions: number[] = [];
    if (crystalClock) {
      for (let from = lowerBound(crystalT, v.openS); from < crystalT.length && (crystalT[from] as number) < v.closeS; ) {
        const binEnd = (crystalT[from] as number) + 1;
        let t = 0;
        let n = 0;
        for (; from < crystalT.length && (crystalT[from] as number) < Math.min(binEnd, v.closeS); from++) {
          t += crystalT[from] as number;
          n++;
        }
        growthTimes.push(t / n);
        growthFractions.push(clockAt(t / n));
      }
    }
    layers.push({
      index: i,
      openS: v.openS,
      closeS: v.closeS,
      timesS: Float64Array.from(timesS),
      clocks: Float64Array.from(clocks),
      clockSpreads: Float64Array.from(spreads),
      values: Float64Array.from(values),
      counts: Float64Array.from(counts),
      crystalClock,
      growth: { timesS: Float64Array.from(growthTimes), fractions: Float64Array.from(growthFractions) },
    });
  });
  if (clockFallbacks > 0) warnings.push(`${label}: ${clockFallbacks} layer(s) had no crystal readings around them; their optical readings are placed on the run time instead`);

  return {
    label,
    recipe,
    layers,
    levels,
    opticalNoise: Math.max(1e-5, differenceNoise(opticalV, 1)),
    crystalNoiseHz: Math.max(1e-3, differenceNoise(crystalV, 2)),
    estimatedNm,
    shutterDelaysS,
    warnings,
  };
}

/**
 * rms of the white noise of a record from its successive (order 1) or second (order 2)
 * differences, by the median absolute value (robust to steps and spikes): for white noise
 * Δ has variance 2σ² and Δ² 6σ²; the median of |N(0, s²)| is 0.6745·s.
 */
export function differenceNoise(values: ArrayLike<number>, order: 1 | 2): number {
  const d: number[] = [];
  for (let i = order; i < values.length; i++) {
    const x = order === 1 ? (values[i] as number) - (values[i - 1] as number) : (values[i] as number) - 2 * (values[i - 1] as number) + (values[i - 2] as number);
    d.push(Math.abs(x));
  }
  if (d.length === 0) return Number.NaN;
  d.sort((a, b) => a - b);
  const median = d[Math.floor(d.length / 2)] as number;
  return median / 0.6745 / Math.sqrt(order === 1 ? 2 : 6);
}

function lowerBound(sorted: readonly number[], x: number): number {
  let lo = 0;
  let hi = sorted.length;
  while (lo < hi) {
    const mid = (lo + hi) >> 1;
    if ((sorted[mid] as number) < x) lo = mid + 1;
    else hi = mid;
  }
  return lo;
}

/** The value at t, linear between the readings around it (the nearest one beyond the ends). */
function interpolate(times: readonly number[], values: readonly number[], t: number): number {
  const j = lowerBound(times, t);
  if (j <= 0) return values[0] as number;
  if (j >= times.length) return values[times.length - 1] as number;
  const t0 = times[j - 1] as number;
  const t1 = times[j] as number;
  const w = t1 > t0 ? (t - t0) / (t1 - t0) : 0;
  return (values[j - 1] as number) * (1 - w) + (values[j] as number) * w;
}

/** The mean of up to 5 readings just before (side −1) or just after (+1) `t`; NaN when there are none within 5 s. */
function levelNear(times: readonly number[], values: readonly number[], t: number, side: -1 | 1): number {
  const j = lowerBound(times, t);
  let sum = 0;
  let n = 0;
  for (let k = 0; k < 5; k++) {
    const at = side < 0 ? j - 1 - k : j + k;
    if (at < 0 || at >= times.length || Math.abs((times[at] as number) - t) > 5) break;
    sum += values[at] as number;
    n++;
  }
  return n > 0 ? sum / n : Number.NaN;
}
