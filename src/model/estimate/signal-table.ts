/**
 * The chip's predicted signal S(d) for the growing layer, tabulated once per layer and read back
 * by a cubic Hermite spline with its analytic derivative: the estimator's inner loop then costs a
 * handful of multiplications per reading instead of one layer matrix per sub-wavelength.
 *
 * Accuracy (derived): on the nodes the slope is the fourth-order central difference of the node
 * values, error h⁴·S⁽⁵⁾/30 (Abramowitz and Stegun, *Handbook of Mathematical Functions*, 25.3.6);
 * between nodes the cubic Hermite interpolant errs by at most h⁴·max|S⁽⁴⁾|/384 (de Boor,
 * *A Practical Guide to Splines*, ch. II). A growing dielectric layer makes S a smooth periodic
 * function of d with angular frequency q = 4πn/λ per nm, |S⁽ᵐ⁾| ≤ A·qᵐ with A ≤ ½ the swing; for
 * n = 2.6 at 400 nm (q = 0.082 per nm, among the fastest curves a monitor sees) and h = 0.1 nm the
 * two errors are ≈ 6e-12 per nm and ≈ 6e-12: nine orders below a reading's noise (1e-3). The
 * spline is C¹ and its derivative is exact for it, so a Gauss–Newton fit on it is consistent.
 */
/** Anything that gives a signal as a function of the growing layer's thickness (a ChipMonitor, say). */
export interface SignalSource {
  signalAt(thicknessNm: number): number;
}

export interface SignalTable {
  /** What the table tabulates; read directly outside the table's range. */
  readonly source: SignalSource;
  /** Chip thickness of node 0, nm (may be negative: the fit's start may sit before the opening). */
  readonly fromNm: number;
  readonly stepNm: number;
  /** Nodes 0 … count−1. */
  readonly count: number;
  readonly values: Float64Array;
  /** dS/dd at the nodes, per nm. */
  readonly slopes: Float64Array;
}

/** Default node spacing, nm (see the accuracy note above). */
export const SIGNAL_TABLE_STEP_NM = 0.1;

/**
 * Tabulates `monitor` from `fromNm` to at least `toNm` every `stepNm`: one signal evaluation per
 * node (plus two on each side for the end slopes).
 */
export function buildSignalTable(source: SignalSource, fromNm: number, toNm: number, stepNm: number = SIGNAL_TABLE_STEP_NM): SignalTable {
  if (!(stepNm > 0) || !(toNm > fromNm)) throw new RangeError('signal table: need stepNm > 0 and toNm > fromNm');
  return tabulate(source, fromNm, stepNm, Math.ceil((toNm - fromNm) / stepNm) + 1);
}

function tabulate(source: SignalSource, fromNm: number, stepNm: number, count: number): SignalTable {
  const padded = new Float64Array(count + 4);
  for (let i = 0; i < count + 4; i++) padded[i] = source.signalAt(fromNm + (i - 2) * stepNm);
  return fromPadded(source, padded, fromNm, stepNm, count);
}

/** A table from its node values with two more on each side (for the end slopes). */
function fromPadded(source: SignalSource, padded: Float64Array, fromNm: number, stepNm: number, count: number): SignalTable {
  const values = padded.slice(2, count + 2);
  const slopes = new Float64Array(count);
  const inv12h = 1 / (12 * stepNm);
  for (let i = 0; i < count; i++) {
    // f′(x) ≈ (f₋₂ − 8f₋₁ + 8f₁ − f₂)/(12h) (Abramowitz and Stegun 25.3.6)
    const j = i + 2;
    slopes[i] = ((padded[j - 2] as number) - 8 * (padded[j - 1] as number) + 8 * (padded[j + 1] as number) - (padded[j + 2] as number)) * inv12h;
  }
  return { source, fromNm, stepNm, count, values, slopes };
}

/** The table the layer fit uses for a layer of chip target `targetNm`: from −(0.1·target + 5) nm to 1.5·target + 5 nm. */
export function layerSignalTable(monitor: SignalSource, targetNm: number): SignalTable {
  return buildSignalTable(monitor, -(0.1 * targetNm + 5), 1.5 * targetNm + 5);
}

/**
 * How the signal changes with the growing layer's index at a fixed optical thickness, tabulated
 * on the grid of `table`: with F(u, κ) the signal of the layer at index κ·n and physical thickness
 * u/κ (so u is the thickness at the design index with the same optical thickness),
 * `first` = ∂F/∂κ and `second` = ∂²F/∂κ² at κ = 1, by central differences over ±δ
 * (Abramowitz and Stegun 25.3.23 and 25.3.24: errors δ²/6·∂³F/∂κ³ and δ²/12·∂⁴F/∂κ⁴).
 * The fit then models F(u, κ) ≈ S(u) + (κ−1)·first(u) + ½(κ−1)²·second(u), exact to (κ−1)³.
 * `plus` and `minus` are the same chip with the growing layer's index × (1 ± δ).
 */
export interface IndexTables {
  readonly first: SignalTable;
  readonly second: SignalTable;
}

export function buildIndexTables(table: SignalTable, plus: SignalSource, minus: SignalSource, delta: number): IndexTables {
  if (!(delta > 0 && delta < 0.2)) throw new RangeError('index tables: delta must be in (0, 0.2)');
  const centre = table.source;
  const first: SignalSource = {
    signalAt: (u) => (plus.signalAt(u / (1 + delta)) - minus.signalAt(u / (1 - delta))) / (2 * delta),
  };
  const second: SignalSource = {
    signalAt: (u) => (plus.signalAt(u / (1 + delta)) - 2 * centre.signalAt(u) + minus.signalAt(u / (1 - delta))) / (delta * delta),
  };
  // Both tables from one pass over the nodes: F(u, 1 ± δ) once each, the centre once.
  const { fromNm, stepNm, count } = table;
  const firstPadded = new Float64Array(count + 4);
  const secondPadded = new Float64Array(count + 4);
  for (let i = 0; i < count + 4; i++) {
    const u = fromNm + (i - 2) * stepNm;
    const p = plus.signalAt(u / (1 + delta));
    const m = minus.signalAt(u / (1 - delta));
    firstPadded[i] = (p - m) / (2 * delta);
    secondPadded[i] = (p - 2 * centre.signalAt(u) + m) / (delta * delta);
  }
  return { first: fromPadded(first, firstPadded, fromNm, stepNm, count), second: fromPadded(second, secondPadded, fromNm, stepNm, count) };
}

/**
 * S and dS/dd at `thicknessNm`: `out[0]`, `out[1]`. Inside the table by the cubic Hermite spline
 * (basis h₀₀ = 2s³ − 3s² + 1, h₁₀ = s³ − 2s² + s, h₀₁ = −2s³ + 3s², h₁₁ = s³ − s²; de Boor, ch. IV);
 * outside it straight from the monitor with the same fourth-order difference (slow, allocation-free).
 */
export function signalAndSlope(table: SignalTable, thicknessNm: number, out: Float64Array): void {
  const h = table.stepNm;
  const x = (thicknessNm - table.fromNm) / h;
  const i = Math.floor(x);
  if (i >= 0 && i < table.count - 1) {
    const s = x - i;
    const s2 = s * s;
    const s3 = s2 * s;
    const p0 = table.values[i] as number;
    const p1 = table.values[i + 1] as number;
    const m0 = (table.slopes[i] as number) * h;
    const m1 = (table.slopes[i + 1] as number) * h;
    out[0] = (2 * s3 - 3 * s2 + 1) * p0 + (s3 - 2 * s2 + s) * m0 + (3 * s2 - 2 * s3) * p1 + (s3 - s2) * m1;
    out[1] = ((6 * s2 - 6 * s) * (p0 - p1) + (3 * s2 - 4 * s + 1) * m0 + (3 * s2 - 2 * s) * m1) / h;
    return;
  }
  const m = table.source;
  out[0] = m.signalAt(thicknessNm);
  out[1] = (m.signalAt(thicknessNm - 2 * h) - 8 * m.signalAt(thicknessNm - h) + 8 * m.signalAt(thicknessNm + h) - m.signalAt(thicknessNm + 2 * h)) / (12 * h);
}
