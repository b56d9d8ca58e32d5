/* global ResizeObserver */
// The three charts (uPlot): the trace of the current layer, the crystal's rate, the outcome
// spectrum. Measured data in dark ink (solid), the model in a muted slate (thin, dashed).
import uPlot from '/vendor/uplot/uPlot.esm.js';
import { clock } from './format.js';

const INK = '#1b2026';
const INK_2 = '#48525e';
const MODEL = '#6d84a3';
const MODEL_FILL = 'rgba(109, 132, 163, 0.16)';
const ACCENT = '#c4410c';
const GRID = '#ecebe6';
const FAMILY = 'system-ui, -apple-system, "Segoe UI", Roboto, sans-serif';
/** Tick labels and marks, px: the normal view's, and the large-type view's (read from 2 m). */
export const FONT_PX = { normal: 12, large: 18 };
let fontPx = FONT_PX.normal;
const font = () => `${fontPx}px ${FAMILY}`;
const charts = new Set();
/** Every chart in large type or not (rebuilt: uPlot fixes its axes at construction). */
export function setLargeType(large) {
  fontPx = large ? FONT_PX.large : FONT_PX.normal;
  for (const c of charts) c.rebuild();
}
/** Tick steps for time axes, s: whole seconds and minutes. */
const TIME_INCRS = [1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 900, 1800, 3600, 7200];
const mmss = (_u, values) => values.map((v) => clock(v));

function axis(label, extra = {}) {
  return {
    label,
    stroke: INK_2,
    font: font(),
    labelFont: font(),
    labelSize: Math.round(fontPx * 1.5),
    grid: { stroke: GRID, width: 1 },
    ticks: { stroke: GRID, width: 1, size: 4 },
    ...extra,
  };
}

const timeAxis = (label) => axis(label, { values: mmss, incrs: TIME_INCRS, space: 5 * fontPx, ...(label ? {} : { label: null, labelSize: 0 }) });

/**
 * A uPlot chart that keeps the size of its box and can be rebuilt with new options (uPlot fixes
 * axes at construction).
 */
function managedChart(el, makeOptions, emptyData) {
  let chart = null;
  const size = () => ({ width: Math.max(120, Math.floor(el.clientWidth)), height: Math.max(90, Math.floor(el.clientHeight)) });
  let data = emptyData();
  const build = () => {
    chart?.destroy();
    chart = new uPlot({ ...makeOptions(), ...size() }, data, el);
    el.dataset.fontPx = String(fontPx);
  };
  new ResizeObserver(() => {
    const s = size();
    if (chart && (s.width !== chart.width || s.height !== chart.height)) chart.setSize(s);
  }).observe(el);
  build();
  const managed = {
    rebuild: build,
    setData: (next) => {
      data = next;
      chart.setData(next);
    },
    /** The uPlot instance (for pictures of the chart). */
    get plot() {
      return chart;
    },
  };
  charts.add(managed);
  return managed;
}

const common = {
  legend: { show: false },
  cursor: { drag: { x: false, y: false, setScale: false }, points: { show: false }, y: false },
  padding: [12, 16, 0, 4],
};

/**
 * The trace: prediction (dashed) and measured signal (solid), in percent, against the layer's
 * thickness on the chip or the time in the layer; the target as a vertical line, the trigger
 * level as a horizontal one, the turning points as small triangles (▲ maximum, ▼ minimum).
 */
export function createTraceChart(el) {
  let view = null;
  let points = [];
  let cuts = [];
  let mode = 'nm';
  const xOfNm = (nmValue) => (mode === 'nm' ? nmValue : nmValue / view.chipRateNmPerS);
  const xOfPoint = (p) => (mode === 'nm' ? p[2] : p[0] - (view.openedAtS ?? 0));

  const drawMarks = (u) => {
    if (!view) return;
    const px = uPlot.pxRatio;
    const ctx = u.ctx;
    const { left, top, width, height } = u.bbox;
    ctx.save();
    ctx.beginPath();
    ctx.rect(left, top, width, height);
    ctx.clip();
    ctx.font = `${Math.round(fontPx * px)}px ${FAMILY}`;
    ctx.textBaseline = 'top';

    if (view.triggerSignal !== null) {
      const y = u.valToPos(view.triggerSignal * 100, 'y', true);
      ctx.strokeStyle = INK_2;
      ctx.lineWidth = 1.25 * px;
      ctx.setLineDash([2 * px, 3 * px]);
      ctx.beginPath();
      ctx.moveTo(left, y);
      ctx.lineTo(left + width, y);
      ctx.stroke();
      ctx.setLineDash([]);
      ctx.fillStyle = INK_2;
      ctx.textAlign = 'left';
      ctx.fillText(`trigger ${(view.triggerSignal * 100).toFixed(2)} %`, left + 8 * px, y + 4 * px);
    }

    const xt = u.valToPos(xOfNm(view.chipTargetNm), 'x', true);
    ctx.strokeStyle = INK_2;
    ctx.lineWidth = 2 * px;
    ctx.beginPath();
    ctx.moveTo(xt, top);
    ctx.lineTo(xt, top + height);
    ctx.stroke();
    ctx.textAlign = 'right';
    const label = mode === 'nm' ? `target ${view.chipTargetNm.toFixed(2)} nm` : `target ≈ ${clock(xOfNm(view.chipTargetNm))} at the planned rate`;
    // The label sits at the top left of the line, unless a turning point's mark is there: then at the bottom.
    const labelW = ctx.measureText(label).width;
    const labelH = (fontPx + 6) * px;
    const hidesMark = (y0) =>
      view.turningPoints.some((tp) => {
        const x = u.valToPos(xOfNm(tp.thicknessNm), 'x', true);
        const y = u.valToPos(tp.signal * 100, 'y', true);
        return x >= xt - labelW - 16 * px && x <= xt + 8 * px && y >= y0 - 14 * px && y <= y0 + labelH + 14 * px;
      });
    const labelY = hidesMark(top + 4 * px) ? top + height - labelH - 4 * px : top + 4 * px;
    ctx.fillStyle = 'rgba(255, 255, 255, 0.85)';
    ctx.fillRect(xt - 8 * px - labelW, labelY, labelW + 4 * px, labelH);
    ctx.fillStyle = INK;
    ctx.fillText(label, xt - 6 * px, labelY + 3 * px);

    ctx.fillStyle = MODEL;
    const s = 5 * px;
    const gap = 5 * px;
    for (const tp of view.turningPoints) {
      const x = u.valToPos(xOfNm(tp.thicknessNm), 'x', true);
      const y = u.valToPos(tp.signal * 100, 'y', true);
      if (x < left || x > left + width) continue;
      const dir = tp.kind === 'maximum' ? -1 : 1;
      ctx.beginPath();
      ctx.moveTo(x, y + dir * gap);
      ctx.lineTo(x - s, y + dir * (gap + 1.6 * s));
      ctx.lineTo(x + s, y + dir * (gap + 1.6 * s));
      ctx.closePath();
      ctx.fill();
    }

    // Cuts sent in this layer: a diamond on the measured trace where the command went out.
    for (const cut of cuts) {
      let at = null;
      for (const p of points) {
        if (p[0] > cut.timeS) break;
        at = p;
      }
      if (!at) continue;
      const x = u.valToPos(xOfPoint(at), 'x', true);
      const y = u.valToPos(at[1] * 100, 'y', true);
      const d = 7 * px;
      ctx.fillStyle = ACCENT;
      ctx.strokeStyle = '#fff';
      ctx.lineWidth = 1.5 * px;
      ctx.beginPath();
      ctx.moveTo(x, y - d);
      ctx.lineTo(x + d, y);
      ctx.lineTo(x, y + d);
      ctx.lineTo(x - d, y);
      ctx.closePath();
      ctx.fill();
      ctx.stroke();
      // The label beside the mark, on whichever side has room for it.
      const room = left + width - (x + d + 3 * px) >= ctx.measureText(cut.label).width;
      ctx.fillStyle = INK;
      ctx.textAlign = room ? 'left' : 'right';
      ctx.textBaseline = 'bottom';
      ctx.fillText(cut.label, room ? x + d + 3 * px : x - d - 3 * px, y - 3 * px);
      ctx.textBaseline = 'top';
    }

    const last = points[points.length - 1];
    if (last) {
      ctx.fillStyle = INK;
      ctx.beginPath();
      ctx.arc(u.valToPos(xOfPoint(last), 'x', true), u.valToPos(last[1] * 100, 'y', true), 4 * px, 0, 2 * Math.PI);
      ctx.fill();
    }
    ctx.restore();
  };

  const makeOptions = () => ({
    ...common,
    scales: {
      x: { time: false, range: (_u, min, max) => [Math.min(0, min), Math.max(max, min + 1)] },
      y: {
        range: (_u, min, max) => {
          const trigger = view?.triggerSignal != null ? view.triggerSignal * 100 : null;
          const lo = trigger === null ? min : Math.min(min, trigger);
          const hi = trigger === null ? max : Math.max(max, trigger);
          const pad = Math.max(0.5, (hi - lo) * 0.1);
          return [lo - pad, hi + pad];
        },
      },
    },
    axes: [mode === 'nm' ? axis('thickness on the chip, nm') : timeAxis('time in the layer, mm:ss'), axis('signal, %', { size: 4.5 * fontPx })],
    series: [
      {},
      { label: 'model', stroke: MODEL, width: 1.5, dash: [7, 5], spanGaps: true, points: { show: false } },
      { label: 'measured', stroke: INK, width: 2.25, spanGaps: true, points: { show: false } },
    ],
    hooks: { draw: [drawMarks] },
  });
  const chart = managedChart(el, makeOptions, () => [[], [], []]);

  const redraw = () => {
    if (!view) {
      chart.setData([[], [], []]);
      return;
    }
    const predX = view.predicted.map((_v, i) => xOfNm(i * view.stepNm));
    const predY = view.predicted.map((v) => v * 100);
    const measX = points.map(xOfPoint);
    const measY = points.map((p) => p[1] * 100);
    if (predX.length === 0) {
      chart.setData([measX, measX.map(() => null), measY]);
    } else if (measX.length === 0) {
      chart.setData([predX, predY, predX.map(() => null)]);
    } else {
      chart.setData(uPlot.join([[predX, predY], [measX, measY]]));
    }
  };

  return {
    /** `cutMarks`: [{ timeS, label }] of the cuts sent in this layer. */
    set(traceView, measured, cutMarks = []) {
      view = traceView;
      points = measured;
      cuts = cutMarks;
      redraw();
    },
    chart,
    describe: () => ({
      title: view ? `Layer ${view.layer} (${view.material}): ${view.signal === 'reflection' ? 'reflectance' : 'transmittance'} at ${view.wavelengthNm} nm` : 'Trace',
      xLabel: mode === 'nm' ? 'thickness of this layer on the chip, nm' : 'time in this layer, s',
      yLabel: 'signal, %',
      vLines: view ? [{ x: xOfNm(view.chipTargetNm), label: 'target' }] : [],
      hLines: view?.triggerSignal != null ? [{ y: view.triggerSignal * 100, label: 'trigger' }] : [],
    }),
    setMode(next) {
      if (next === mode) return;
      mode = next;
      chart.rebuild();
      redraw();
    },
  };
}

/** Run time the crystal strip shows, s: the last ten minutes. */
export const CRYSTAL_WINDOW_S = 600;

/** The crystal strip: rate against run time over the last ten minutes, with its allowed band shaded. */
export function createCrystalChart(el) {
  let cuts = [];
  // Past cuts across the strip: a dashed line at each, its layer's number beside a diamond.
  const drawCuts = (u) => {
    const px = uPlot.pxRatio;
    const ctx = u.ctx;
    const { left, top, width, height } = u.bbox;
    ctx.save();
    ctx.beginPath();
    ctx.rect(left, top, width, height);
    ctx.clip();
    ctx.font = `${Math.round(fontPx * px)}px ${FAMILY}`;
    ctx.textBaseline = 'top';
    ctx.textAlign = 'left';
    for (const cut of cuts) {
      const x = u.valToPos(cut.timeS, 'x', true);
      if (!(x >= left && x <= left + width)) continue;
      ctx.strokeStyle = ACCENT;
      ctx.lineWidth = 1 * px;
      ctx.setLineDash([3 * px, 3 * px]);
      ctx.beginPath();
      ctx.moveTo(x, top);
      ctx.lineTo(x, top + height);
      ctx.stroke();
      ctx.setLineDash([]);
      ctx.fillStyle = ACCENT;
      ctx.fillText(`◆${cut.layer}`, x + 2 * px, top + 2 * px);
    }
    ctx.restore();
  };
  const chart = managedChart(
    el,
    () => ({
      ...common,
      scales: { x: { time: false } },
      axes: [timeAxis(''), axis('rate, nm/s', { size: 4.5 * fontPx })],
      series: [
        {},
        { label: 'band low', stroke: MODEL, width: 1, paths: uPlot.paths.stepped({ align: 1 }), points: { show: false } },
        { label: 'band high', stroke: MODEL, width: 1, paths: uPlot.paths.stepped({ align: 1 }), points: { show: false } },
        { label: 'rate', stroke: INK, width: 1.75, points: { show: false } },
      ],
      bands: [{ series: [2, 1], fill: MODEL_FILL }],
      hooks: { draw: [drawCuts] },
    }),
    () => [[], [], [], []],
  );
  return {
    /** `cutMarks`: [{ timeS, layer }] of the cuts so far. */
    set(allPoints, cutMarks = []) {
      cuts = cutMarks;
      const end = allPoints.length > 0 ? allPoints[allPoints.length - 1][0] : 0;
      const points = allPoints.filter((p) => p[0] >= end - CRYSTAL_WINDOW_S);
      // Break the lines where the rate was not measured (between layers, shutter closed).
      const span = points.length > 1 ? points[points.length - 1][0] - points[0][0] : 0;
      const gapS = Math.max(2, (4 * span) / Math.max(1, points.length));
      const t = [];
      const lo = [];
      const hi = [];
      const r = [];
      points.forEach((p, i) => {
        const previous = points[i - 1];
        if (previous && p[0] - previous[0] > gapS) {
          t.push((p[0] + previous[0]) / 2);
          lo.push(null);
          hi.push(null);
          r.push(null);
        }
        t.push(p[0]);
        r.push(p[1]);
        lo.push(p[2]);
        hi.push(p[3]);
      });
      chart.setData([t, lo, hi, r]);
    },
    chart,
    describe: () => ({ title: 'Crystal: deposition rate', xLabel: 'run time, s', yLabel: 'rate, nm/s', vLines: [], hLines: [] }),
  };
}

/** The outcome: the stack as deposited so far against the design, R or T in percent. */
export function createOutcomeChart(el) {
  let quantity = 'T';
  const chart = managedChart(
    el,
    () => ({
      ...common,
      scales: {
        x: { time: false },
        y: { range: (_u, min, max) => [Math.max(0, Math.floor(min / 5) * 5 - 2), Math.min(102, Math.ceil(max / 5) * 5 + 2)] },
      },
      axes: [axis('wavelength, nm'), axis(quantity === 'T' ? 'T, %' : 'R, %', { size: 4 * fontPx })],
      series: [
        {},
        { label: 'design', stroke: MODEL, width: 1.5, dash: [7, 5], points: { show: false } },
        { label: 'as deposited', stroke: INK, width: 2, points: { show: false } },
      ],
    }),
    () => [[], [], []],
  );
  return {
    set(outcome, q) {
      if (q !== quantity) {
        quantity = q;
        chart.rebuild();
      }
      if (!outcome) {
        chart.setData([[], [], []]);
        return;
      }
      chart.setData([outcome.wavelengthsNm, outcome.design[q].map((v) => v * 100), outcome.deposited[q].map((v) => v * 100)]);
    },
    chart,
    describe: () => ({ title: `Outcome: ${quantity === 'T' ? 'transmittance' : 'reflectance'}, as deposited and as designed`, xLabel: 'wavelength, nm', yLabel: `${quantity}, %`, vLines: [], hLines: [] }),
  };
}
