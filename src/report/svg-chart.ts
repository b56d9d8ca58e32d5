/**
 * A small, dependency-free SVG 1.1 line-chart writer for the command line's `--plot FILE.svg`
 * options. Pure: it returns the document as a string and does no I/O.
 *
 * What must stay true:
 * - the output is a well-formed standalone SVG 1.1 document with all text escaped for XML;
 * - colour is never the only cue: every series also has its own dash style, shown in the legend;
 * - a non-finite x or y breaks a series' line (a new path segment) rather than being drawn;
 * - tick values are 1-2-5 "nice" numbers;
 * - cost is linear in the number of points (strings are collected in arrays and joined once).
 */

/** How a series' line is drawn. */
export type LineStyle = 'solid' | 'dashed' | 'dotted' | 'dash-dot';

/** One line of the chart. `x` and `y` must have the same length. */
export interface ChartSeries {
  /** Name shown in the legend. */
  label: string;
  x: ArrayLike<number>;
  /** Values; a non-finite value (NaN, ±Infinity) breaks the line. */
  y: ArrayLike<number>;
  /** Default: solid, dashed, dotted, dash-dot in turn by series index. */
  style?: LineStyle;
  /** Any SVG colour. Default: the built-in palette by series index (dark ink first). */
  color?: string;
  /** Stroke width in px. Default 1.6. */
  lineWidth?: number;
}

/** A vertical line across the plot at `x` (for example a predicted cut). */
export interface ChartMarker {
  x: number;
  label?: string;
  /** Default solid. */
  style?: LineStyle;
  /** Default the accent colour ("act now"). */
  color?: string;
}

/** A legend entry for something that is not a series: a kind of marker or of point. */
export interface ChartLegendEntry {
  label: string;
  /** A vertical marker line (with `style` and `color` as the markers it names), or a point shape. */
  kind: 'marker' | 'point' | 'band';
  style?: LineStyle;
  color?: string;
  shape?: ChartPoint['shape'];
}

/** A single marked point (for example a turning point). Default shape: tick. */
export interface ChartPoint {
  x: number;
  y: number;
  label?: string;
  shape?: 'tick' | 'circle' | 'triangle';
}

/** A horizontal line across the plot at `y` (for example a trigger level). */
export interface ChartHLine {
  y: number;
  label?: string;
}

/** A shaded band between `from` and `to` along x (default) or along y. */
export interface ChartBand {
  from: number;
  to: number;
  label?: string;
  /** Default 'x': a vertical strip. 'y': a horizontal strip (for example an allowed rate band). */
  axis?: 'x' | 'y';
  /** Default true; false draws only the label (for example every other of a row of bands, so that neighbours are told apart). */
  shaded?: boolean;
}

export interface ChartOptions {
  title: string;
  /** Axis label, units included as the caller wants them shown, e.g. "Thickness (nm)". */
  xLabel: string;
  yLabel: string;
  /** Default 800 px. */
  width?: number;
  /** Default 480 px. */
  height?: number;
  /** Default: data range with a little padding. */
  xRange?: [number, number];
  /** Default: data range with a little padding. */
  yRange?: [number, number];
  /** y values are fractions 0..1, shown as percent tick labels. Default false. */
  yPercent?: boolean;
  /**
   * A logarithmic y axis (decades, with 2 and 5 between them over a short span). Values ≤ 0
   * cannot be drawn on it and break the line like a non-finite value. Default false.
   */
  yLog?: boolean;
  /** Legend entries after the series': what the markers, points and bands mean. */
  legend?: ChartLegendEntry[];
  markers?: ChartMarker[];
  points?: ChartPoint[];
  /** Ids inside the document start with this (default "fringe-plot"): give each chart its own when several share one HTML page. */
  idPrefix?: string;
  hLines?: ChartHLine[];
  bands?: ChartBand[];
}

/** Ticks from {@link niceTicks}: `ticks[i] = ticks[0] + i * step`. */
export interface NiceTicks {
  /** 1, 2 or 5 times a power of ten. */
  step: number;
  ticks: number[];
}

/** Muted palette of our own for a light background; dark ink first for measured data. */
export const CHART_PALETTE: readonly string[] = [
  '#1d2733', // ink
  '#3f6e9a', // slate blue
  '#a57d2c', // ochre
  '#3f8a72', // sea green
  '#7d5a8c', // plum
  '#6f7780', // grey
];

const STYLE_CYCLE: readonly LineStyle[] = ['solid', 'dashed', 'dotted', 'dash-dot'];
const ACCENT = '#b8412f'; // "act now": markers such as the predicted cut
const INK = '#1d2733';
const AXIS = '#4a525c';
const GRID = '#e3e6ea';
const MUTED_TEXT = '#4a525c';
const BAND_FILL = '#dde6ef';
const FONT = "'DejaVu Sans', 'Helvetica Neue', Helvetica, Arial, sans-serif";

const XML_ESCAPES: Record<string, string> = {
  '&': '&amp;',
  '<': '&lt;',
  '>': '&gt;',
  '"': '&quot;',
  "'": '&apos;',
};

/**
 * Escapes text for XML content and attribute values. Characters that XML 1.0 forbids
 * (C0 controls other than tab, newline, carriage return) are dropped.
 */
export function escapeXml(text: string): string {
  // eslint-disable-next-line no-control-regex
  return text.replace(/[\u0000-\u0008\u000B\u000C\u000E-\u001F\uFFFE\uFFFF]/g, '').replace(/[&<>"']/g, (c) => XML_ESCAPES[c] ?? c);
}

/**
 * Nice tick values covering [min, max]: the step is 1, 2 or 5 times a power of ten, chosen so
 * that there are about `targetCount` intervals (never fewer than `targetCount / 2.5`), and the
 * first tick is ≤ min, the last ≥ max. Needs a range that Float64 can tick: finite min < max
 * within ±1e300, with max − min at least 1e-12 of max(|min|, |max|).
 */
export function niceTicks(min: number, max: number, targetCount = 6): NiceTicks {
  if (!isUsableRange(min, max)) {
    throw new RangeError(`niceTicks needs finite min < max, no wider than ±1e300 and not finer than 1e-12 of their size, got ${min}, ${max}`);
  }
  const count = Math.max(1, targetCount);
  const raw = (max - min) / count;
  let magnitude = 10 ** Math.floor(Math.log10(raw));
  const norm = raw / magnitude;
  let mantissa: number;
  if (norm <= 1) mantissa = 1;
  else if (norm <= 2) mantissa = 2;
  else if (norm <= 5) mantissa = 5;
  else {
    mantissa = 1;
    magnitude *= 10;
  }
  // A step such as 2e-7 is kept as mantissa × 10^k and rebuilt through a decimal string so
  // ticks like 0.3 come out as 0.3, not 0.30000000000000004.
  const step = Number(`${mantissa}e${Math.round(Math.log10(magnitude))}`);
  const slack = 1e-9;
  const first = Math.floor(min / step + slack);
  const last = Math.ceil(max / step - slack);
  const ticks: number[] = [];
  for (let i = first; i <= last; i++) ticks.push(cleanMultiple(i, step));
  return { step, ticks };
}

const MAX_ABS = 1e300;
const MIN_RELATIVE_SPAN = 1e-12;

function isUsableRange(lo: number, hi: number): boolean {
  if (!(Math.abs(lo) <= MAX_ABS && Math.abs(hi) <= MAX_ABS && hi > lo)) return false;
  return hi - lo >= MIN_RELATIVE_SPAN * Math.max(Math.abs(lo), Math.abs(hi));
}

/** i × step, rounded to the step's decimal precision. */
function cleanMultiple(i: number, step: number): number {
  const value = i * step;
  const decimals = Math.max(0, -Math.floor(Math.log10(step) + 1e-9));
  if (decimals === 0 || decimals > 20) return value;
  return Number(value.toFixed(decimals));
}

/** Formats a tick value with just the decimals its step needs. */
export function formatTick(value: number, step: number, percent = false): string {
  const v = percent ? value * 100 : value;
  const s = percent ? step * 100 : step;
  if (Math.abs(v) < s * 1e-9) return percent ? '0%' : '0';
  const big = Math.max(Math.abs(v), s);
  let text: string;
  if (big >= 1e7 || s < 1e-5) {
    const digits = Math.max(0, Math.floor(Math.log10(Math.abs(v))) - Math.floor(Math.log10(s) + 1e-9));
    text = v.toExponential(Math.min(digits, 15));
  } else {
    const decimals = Math.max(0, -Math.floor(Math.log10(s) + 1e-9));
    text = v.toFixed(decimals);
  }
  // Typographic minus reads better than a hyphen beside numbers.
  text = text.replace(/^-/, '\u2212');
  return percent ? `${text}%` : text;
}

const DASH: Record<LineStyle, string | null> = {
  solid: null,
  dashed: '7 4',
  dotted: '0.1 3.6',
  'dash-dot': '9 3.5 0.1 3.5',
};

function strokeStyleAttrs(style: LineStyle, width: number): string {
  const dash = DASH[style];
  // Round caps everywhere: dots need them, and a lone point is drawn as a zero-length segment.
  const common = `stroke-width="${r2(width)}" stroke-linecap="round" stroke-linejoin="round"`;
  if (dash === null) return common;
  // Dots are zero-length dashes with round caps; their spacing scales with the line width.
  const scaled = dash
    .split(' ')
    .map((d) => r2(Number(d) * Math.max(1, width / 1.6)))
    .join(' ');
  return `${common} stroke-dasharray="${scaled}"`;
}

/** Rounds a coordinate to 2 decimals and prints it compactly. */
function r2(v: number): string {
  // Far-off-scale coordinates are clamped so the text stays plain decimal; the plot is clipped.
  const c = v > 1e6 ? 1e6 : v < -1e6 ? -1e6 : v;
  const r = Math.round(c * 100) / 100;
  return String(r === 0 ? 0 : r);
}

/** Rough width of a text run in px (average glyph about 0.6 em). */
function textWidth(text: string, fontSize: number): number {
  return text.length * fontSize * 0.6;
}

interface Range {
  lo: number;
  hi: number;
}

function checkRange(name: string, r: [number, number] | undefined): Range | null {
  if (r === undefined) return null;
  const [lo, hi] = r;
  if (!isUsableRange(lo, hi)) {
    throw new RangeError(
      `${name} must be two finite numbers within ±1e300, the first below the second by at least 1e-12 of their size, got [${lo}, ${hi}]`,
    );
  }
  return { lo, hi };
}

function autoRange(values: number[], padFraction: number): Range {
  let lo = Infinity;
  let hi = -Infinity;
  for (const raw of values) {
    // Values beyond ±1e300 are ranged as ±1e300 so the span stays finite.
    const v = Math.min(MAX_ABS, Math.max(-MAX_ABS, raw));
    if (v < lo) lo = v;
    if (v > hi) hi = v;
  }
  if (!(lo <= hi)) return { lo: 0, hi: 1 };
  if (lo === hi) {
    const half = lo === 0 ? 1 : Math.abs(lo) * 0.1;
    lo -= half;
    hi += half;
  } else {
    const pad = (hi - lo) * padFraction;
    lo -= pad;
    hi += pad;
  }
  // Too fine a span for Float64 ticks (or a subnormal one): widen it about its centre.
  const minSpan = Math.max(1e-9 * Math.max(Math.abs(lo), Math.abs(hi)), 1e-300);
  if (!(hi - lo >= minSpan)) {
    const centre = lo / 2 + hi / 2;
    lo = centre - minSpan / 2;
    hi = centre + minSpan / 2;
  }
  return { lo: Math.max(lo, -MAX_ABS), hi: Math.min(hi, MAX_ABS) };
}

function collectFinite(out: number[], values: ArrayLike<number>): void {
  for (let i = 0; i < values.length; i++) {
    const v = values[i];
    if (v !== undefined && Number.isFinite(v)) out.push(v);
  }
}

/** Ticks of a range that fall inside it (the axis keeps the range it was given). */
function ticksInside(range: Range, targetCount: number): NiceTicks {
  const { step, ticks } = niceTicks(range.lo, range.hi, targetCount);
  const eps = step * 1e-9;
  return { step, ticks: ticks.filter((t) => t >= range.lo - eps && t <= range.hi + eps) };
}

function checkPositive(name: string, v: number | undefined, fallback: number): number {
  if (v === undefined) return fallback;
  if (!Number.isFinite(v) || v < 100) throw new RangeError(`${name} must be a finite number ≥ 100 px, got ${v}`);
  return v;
}

/**
 * Renders a line chart as a standalone SVG 1.1 document.
 *
 * Layers, bottom to top: white background, bands, grid, series lines, horizontal lines,
 * markers, points, axes, labels, legend. Everything drawn in data coordinates is clipped to the
 * plot area. Throws RangeError for a bad option (naming it) or a series whose x and y lengths
 * differ.
 */
export function renderLineChart(series: readonly ChartSeries[], options: ChartOptions): string {
  return `<?xml version="1.0" encoding="UTF-8"?>\n${renderChartElement(series, options, { y: 0, id: 'fringe-plot-clip' })}`;
}

/** One chart in a stack of panels (see {@link renderChartStack}). */
export interface ChartPanel {
  series: readonly ChartSeries[];
  options: ChartOptions;
}

/**
 * Several charts one above the other in one standalone SVG document, each with its own axes
 * and scale (for example R and T of a coating, each scaled to its own data). The document is
 * as wide as the widest panel.
 */
export function renderChartStack(panels: readonly ChartPanel[]): string {
  if (panels.length === 0) throw new RangeError('renderChartStack needs at least one panel');
  const heights = panels.map((p) => checkPositive('height', p.options.height, 480));
  const width = Math.max(...panels.map((p) => checkPositive('width', p.options.width, 800)));
  const height = heights.reduce((a, b) => a + b, 0);
  const out = [
    '<?xml version="1.0" encoding="UTF-8"?>',
    `<svg xmlns="http://www.w3.org/2000/svg" version="1.1" width="${width}" height="${height}" viewBox="0 0 ${width} ${height}" font-family="${escapeXml(FONT)}">`,
    `<title>${escapeXml(panels.map((p) => p.options.title).join(' / '))}</title>`,
    `<rect width="${width}" height="${height}" fill="#ffffff"/>`,
  ];
  let y = 0;
  panels.forEach((p, i) => {
    out.push(renderChartElement(p.series, p.options, { y, id: `fringe-plot-clip-${i + 1}` }).trimEnd());
    y += heights[i] as number;
  });
  out.push('</svg>');
  return out.join('\n') + '\n';
}

const log10OrNaN = (v: number): number => (v > 0 ? Math.log10(v) : Number.NaN);

/** Decade ticks of a log10 range (with 2× and 5× when it spans under three decades), as log10 values. */
function logTicks(range: Range): NiceTicks {
  const ticks: number[] = [];
  const mantissas = range.hi - range.lo < 3 ? [1, 2, 5] : [1];
  for (let e = Math.floor(range.lo) - 1; e <= Math.ceil(range.hi); e++) {
    for (const m of mantissas) {
      const t = Math.log10(m) + e;
      if (t >= range.lo - 1e-9 && t <= range.hi + 1e-9) ticks.push(t);
    }
  }
  return { step: Number.NaN, ticks };
}

/** A log tick's label: 1, 2 or 5 times a power of ten, in plain decimals where they stay short. */
function formatLogTick(log: number, percent: boolean): string {
  const v = Number((10 ** log * (percent ? 100 : 1)).toPrecision(1));
  const text = v >= 1e-4 && v < 1e7 ? String(v) : v.toExponential(0);
  return percent ? `${text}%` : text;
}

/** Greedy word wrap to lines of at most `maxWidth` px (a single long word stays whole). */
function wrapWords(text: string, maxWidth: number, fontSize: number): string[] {
  const lines: string[] = [];
  let line = '';
  for (const word of text.split(/\s+/).filter((w) => w !== '')) {
    const candidate = line === '' ? word : `${line} ${word}`;
    if (line !== '' && textWidth(candidate, fontSize) > maxWidth) {
      lines.push(line);
      line = word;
    } else {
      line = candidate;
    }
  }
  if (line !== '' || lines.length === 0) lines.push(line);
  return lines;
}

function renderChartElement(seriesIn: readonly ChartSeries[], optionsIn: ChartOptions, place: { y: number; id: string }): string {
  // A log axis is drawn as a linear axis of log10 y: everything on y is mapped once, here.
  const yLog = optionsIn.yLog === true;
  const series: readonly ChartSeries[] = yLog ? seriesIn.map((s) => ({ ...s, y: Array.from(s.y, log10OrNaN) })) : seriesIn;
  const options: ChartOptions = yLog
    ? {
        ...optionsIn,
        ...(optionsIn.yRange ? { yRange: optionsIn.yRange.map(log10OrNaN) as [number, number] } : {}),
        ...(optionsIn.points ? { points: optionsIn.points.map((p) => ({ ...p, y: log10OrNaN(p.y) })) } : {}),
        ...(optionsIn.hLines ? { hLines: optionsIn.hLines.map((h) => ({ ...h, y: log10OrNaN(h.y) })) } : {}),
        ...(optionsIn.bands ? { bands: optionsIn.bands.map((b) => (b.axis === 'y' ? { ...b, from: log10OrNaN(b.from), to: log10OrNaN(b.to) } : b)) } : {}),
      }
    : optionsIn;
  const width = checkPositive('width', options.width, 800);
  const height = checkPositive('height', options.height, 480);
  const percent = options.yPercent === true;
  const markers = options.markers ?? [];
  const points = options.points ?? [];
  const hLines = options.hLines ?? [];
  const bands = options.bands ?? [];

  series.forEach((s, i) => {
    if (s.x.length !== s.y.length) {
      throw new RangeError(`series ${i} ("${s.label}") has ${s.x.length} x values but ${s.y.length} y values`);
    }
  });

  // Ranges: given, or from everything that is drawn, with a little padding.
  let xRange = checkRange('xRange', options.xRange);
  let yRange = checkRange('yRange', options.yRange);
  if (xRange === null) {
    const xs: number[] = [];
    for (const s of series) collectFinite(xs, s.x);
    collectFinite(xs, markers.map((m) => m.x));
    collectFinite(xs, points.map((p) => p.x));
    for (const b of bands) if (b.axis !== 'y') collectFinite(xs, [b.from, b.to]);
    xRange = autoRange(xs, 0.02);
  }
  if (yRange === null) {
    const ys: number[] = [];
    for (const s of series) {
      // Only y values whose x is finite are drawn, so only they set the range.
      for (let i = 0; i < s.y.length; i++) {
        const x = s.x[i];
        const y = s.y[i];
        if (x !== undefined && y !== undefined && Number.isFinite(x) && Number.isFinite(y)) ys.push(y);
      }
    }
    collectFinite(ys, points.map((p) => p.y));
    collectFinite(ys, hLines.map((h) => h.y));
    for (const b of bands) if (b.axis === 'y') collectFinite(ys, [b.from, b.to]);
    yRange = autoRange(ys, 0.05);
  }
  const xr = xRange;
  const yr = yRange;

  // Layout. Fonts: title 15 bold, axis labels 13, ticks and legend 12, annotations 11.
  const extras = options.legend ?? [];
  const legendItems = [...series.map((s) => s.label), ...extras.map((e) => e.label)].map((label) => ({ label, width: 30 + 7 + textWidth(label, 12) + 20 }));
  const yTargetGuess = Math.max(2, Math.round((height - 140) / 55));
  const yTicks = yLog ? logTicks(yr) : ticksInside(yr, yTargetGuess);
  const yTickLabels = yTicks.ticks.map((t) => (yLog ? formatLogTick(t, percent) : formatTick(t, yTicks.step, percent)));
  const maxYLabelWidth = Math.max(0, ...yTickLabels.map((t) => textWidth(t, 12)));
  const plotLeft = Math.round(24 + maxYLabelWidth + 12);
  const plotRightGuess = width - 24;
  // A title wider than the chart is wrapped onto more lines rather than cut off at the edge.
  const titleLines = wrapWords(options.title, width - plotLeft - 16, 15);
  const titleBaseline = 24 + (titleLines.length - 1) * 19;

  // Legend: one row at natural widths if it fits; otherwise a grid of equal columns, so wrapped
  // rows line up.
  const legendRows: { label: string; x: number }[][] = [];
  {
    const available = plotRightGuess - plotLeft + 20;
    const natural = legendItems.reduce((sum, item) => sum + item.width, 0);
    if (natural <= available) {
      let cursor = plotLeft;
      legendRows.push(
        legendItems.map((item) => {
          const placed = { label: item.label, x: cursor };
          cursor += item.width;
          return placed;
        }),
      );
    } else {
      const column = Math.max(...legendItems.map((item) => item.width));
      const perRow = Math.max(1, Math.floor(available / column));
      legendItems.forEach((item, i) => {
        const r = Math.floor(i / perRow);
        (legendRows[r] ??= []).push({ label: item.label, x: plotLeft + (i % perRow) * column });
      });
    }
  }
  const legendTop = titleBaseline + 22;
  const legendRowHeight = 18;
  const plotTop = legendTop + legendRows.length * legendRowHeight + 10;
  const plotBottom = height - 52;
  const xTargetGuess = Math.max(2, Math.round((plotRightGuess - plotLeft) / 90));
  const xTicks = ticksInside(xr, xTargetGuess);
  const xTickLabels = xTicks.ticks.map((t) => formatTick(t, xTicks.step));
  // The last x tick label is centred on the plot's right edge at most, so leave half of it.
  const lastXLabel = xTickLabels[xTickLabels.length - 1] ?? '';
  const plotRight = Math.round(width - Math.max(24, textWidth(lastXLabel, 12) / 2 + 8));
  const plotW = plotRight - plotLeft;
  const plotH = plotBottom - plotTop;
  if (plotW < 20 || plotH < 20) {
    throw new RangeError(`width and height leave no room for the plot (${width} × ${height} px)`);
  }

  const sx = plotW / (xr.hi - xr.lo);
  const sy = plotH / (yr.hi - yr.lo);
  const px = (x: number): number => plotLeft + (x - xr.lo) * sx;
  const py = (y: number): number => plotBottom - (y - yr.lo) * sy;
  const inX = (x: number): boolean => Number.isFinite(x) && x >= xr.lo && x <= xr.hi;
  const inY = (y: number): boolean => Number.isFinite(y) && y >= yr.lo && y <= yr.hi;

  // Ids unique within the document: a panel's own, under the chart's prefix when several charts share a page.
  const clipId = options.idPrefix === undefined ? place.id : place.id.replace(/^fringe-plot/, escapeXml(options.idPrefix));
  const out: string[] = [];
  out.push(
    `<svg xmlns="http://www.w3.org/2000/svg" version="1.1"${place.y !== 0 ? ` y="${place.y}"` : ''} width="${width}" height="${height}" viewBox="0 0 ${width} ${height}" font-family="${escapeXml(FONT)}">`,
  );
  out.push(`<title>${escapeXml(options.title)}</title>`);
  out.push(
    `<defs><clipPath id="${clipId}"><rect x="${plotLeft}" y="${plotTop}" width="${plotW}" height="${plotH}"/></clipPath></defs>`,
  );
  out.push(`<rect width="${width}" height="${height}" fill="#ffffff"/>`);
  out.push(`<rect class="plot-area" x="${plotLeft}" y="${plotTop}" width="${plotW}" height="${plotH}" fill="#ffffff"/>`);

  // Bands.
  const bandLabels: string[] = [];
  if (bands.length > 0) {
    out.push(`<g class="bands" clip-path="url(#${clipId})">`);
    for (const b of bands) {
      if (!Number.isFinite(b.from) || !Number.isFinite(b.to)) continue;
      const lo = Math.min(b.from, b.to);
      const hi = Math.max(b.from, b.to);
      if (b.axis === 'y') {
        const y0 = Math.max(plotTop, py(hi));
        const y1 = Math.min(plotBottom, py(lo));
        if (y1 <= y0) continue;
        out.push(`<rect class="band" x="${plotLeft}" y="${r2(y0)}" width="${plotW}" height="${r2(y1 - y0)}" fill="${BAND_FILL}" fill-opacity="0.7"/>`);
        if (b.label !== undefined) {
          bandLabels.push(
            `<text class="band-label" x="${plotLeft + 6}" y="${r2(y0 + 13)}" font-size="11" fill="${MUTED_TEXT}">${escapeXml(b.label)}</text>`,
          );
        }
      } else {
        const x0 = Math.max(plotLeft, px(lo));
        const x1 = Math.min(plotRight, px(hi));
        if (x1 <= x0) continue;
        if (b.shaded !== false) out.push(`<rect class="band" x="${r2(x0)}" y="${plotTop}" width="${r2(x1 - x0)}" height="${plotH}" fill="${BAND_FILL}" fill-opacity="0.7"/>`);
        if (b.label !== undefined) {
          bandLabels.push(
            `<text class="band-label" x="${r2(x0 + 5)}" y="${plotBottom - 7}" font-size="11" fill="${MUTED_TEXT}">${escapeXml(b.label)}</text>`,
          );
        }
      }
    }
    out.push('</g>');
  }

  // Grid.
  out.push(`<g class="grid" stroke="${GRID}" stroke-width="1">`);
  for (const t of xTicks.ticks) {
    const x = r2(Math.round(px(t)) + 0.5);
    out.push(`<line x1="${x}" y1="${plotTop}" x2="${x}" y2="${plotBottom}"/>`);
  }
  for (const t of yTicks.ticks) {
    const y = r2(Math.round(py(t)) + 0.5);
    out.push(`<line x1="${plotLeft}" y1="${y}" x2="${plotRight}" y2="${y}"/>`);
  }
  out.push('</g>');
  out.push(...bandLabels);

  // Series. One <path> per unbroken run of finite points.
  const styles: LineStyle[] = series.map((s, i) => s.style ?? STYLE_CYCLE[i % STYLE_CYCLE.length] ?? 'solid');
  const colors: string[] = series.map((s, i) => s.color ?? CHART_PALETTE[i % CHART_PALETTE.length] ?? INK);
  out.push(`<g class="series" fill="none" clip-path="url(#${clipId})">`);
  series.forEach((s, i) => {
    const style = styles[i] ?? 'solid';
    const lw = s.lineWidth ?? 1.6;
    const head = `<path class="series-line" data-series="${i}" stroke="${escapeXml(colors[i] ?? INK)}" ${strokeStyleAttrs(style, lw)} d="`;
    let parts: string[] = [];
    const flush = (): void => {
      if (parts.length === 0) return;
      // A lone point still shows, as a dot: a zero-length segment with round caps.
      if (parts.length === 1) parts.push('l0 0');
      out.push(`${head}${parts.join(' ')}"/>`);
      parts = [];
    };
    const n = s.y.length;
    for (let k = 0; k < n; k++) {
      const x = s.x[k] ?? NaN;
      const y = s.y[k] ?? NaN;
      if (!Number.isFinite(x) || !Number.isFinite(y)) {
        flush();
        continue;
      }
      parts.push(`${parts.length === 0 ? 'M' : 'L'}${r2(px(x))} ${r2(py(y))}`);
    }
    flush();
  });
  out.push('</g>');

  // Horizontal lines, markers and points. Their labels go outside the clip group, each on a
  // translucent white patch so it stays readable over lines and grid.
  const annotationLabels: string[] = [];
  const shapes: string[] = [];
  const annotate = (cls: string, x: number, y: number, anchor: 'start' | 'middle' | 'end', color: string, label: string): void => {
    const w = textWidth(label, 11) + 4;
    const left = anchor === 'start' ? x - 2 : anchor === 'end' ? x - w + 2 : x - w / 2;
    annotationLabels.push(
      `<rect class="label-patch" x="${r2(left)}" y="${r2(y - 11)}" width="${r2(w)}" height="14" fill="#ffffff" fill-opacity="0.85"/>`,
      `<text class="${cls}" x="${r2(x)}" y="${r2(y)}" text-anchor="${anchor}" font-size="11" fill="${color}">${escapeXml(label)}</text>`,
    );
  };
  if (hLines.length > 0) {
    shapes.push(`<g class="hlines" clip-path="url(#${clipId})" stroke="${AXIS}" stroke-width="1.2" stroke-dasharray="5 3">`);
    for (const h of hLines) {
      if (!inY(h.y)) continue;
      const y = r2(py(h.y));
      shapes.push(`<line class="hline" x1="${plotLeft}" y1="${y}" x2="${plotRight}" y2="${y}"/>`);
      if (h.label !== undefined) {
        annotate('hline-label', plotRight - 6, py(h.y) - 5, 'end', MUTED_TEXT, h.label);
      }
    }
    shapes.push('</g>');
  }
  if (markers.length > 0) {
    shapes.push(`<g class="markers" clip-path="url(#${clipId})" stroke="${ACCENT}" stroke-width="1.5">`);
    for (const m of markers) {
      if (!inX(m.x)) continue;
      const x = r2(px(m.x));
      const look = `${m.color !== undefined ? ` stroke="${escapeXml(m.color)}"` : ''}${m.style !== undefined && m.style !== 'solid' ? ` ${strokeStyleAttrs(m.style, 1.5)}` : ''}`;
      shapes.push(`<line class="marker" x1="${x}" y1="${plotTop}" x2="${x}" y2="${plotBottom}"${look}/>`);
      if (m.label !== undefined) {
        // Label to the right of the line, or to its left when it would run off the plot.
        const fits = px(m.x) + 6 + textWidth(m.label, 11) <= plotRight;
        annotate('marker-label', px(m.x) + (fits ? 5 : -5), plotTop + 14, fits ? 'start' : 'end', m.color ?? ACCENT, m.label);
      }
    }
    shapes.push('</g>');
  }
  if (points.length > 0) {
    shapes.push(`<g class="points" clip-path="url(#${clipId})" stroke="${INK}" fill="${INK}">`);
    for (const p of points) {
      if (!inX(p.x) || !inY(p.y)) continue;
      const x = px(p.x);
      const y = py(p.y);
      const shape = p.shape ?? 'tick';
      if (shape === 'circle') {
        shapes.push(`<circle class="point point-circle" cx="${r2(x)}" cy="${r2(y)}" r="3.5" fill="#ffffff" stroke-width="1.5"/>`);
      } else if (shape === 'triangle') {
        shapes.push(
          `<path class="point point-triangle" d="M${r2(x)} ${r2(y - 4.5)}L${r2(x + 4.5)} ${r2(y + 3.5)}L${r2(x - 4.5)} ${r2(y + 3.5)}Z" stroke="none"/>`,
        );
      } else {
        shapes.push(`<line class="point point-tick" x1="${r2(x)}" y1="${r2(y - 6)}" x2="${r2(x)}" y2="${r2(y + 6)}" stroke-width="1.5"/>`);
      }
      if (p.label !== undefined) {
        annotate('point-label', x, y - 10, 'middle', INK, p.label);
      }
    }
    shapes.push('</g>');
  }
  // Labels go under the annotation shapes so a patch never hides a marker or a trigger line.
  out.push(...annotationLabels, ...shapes);

  // Axes, ticks and tick labels.
  out.push(`<g class="axes" stroke="${AXIS}" stroke-width="1" fill="none">`);
  out.push(`<line x1="${plotLeft}" y1="${plotBottom + 0.5}" x2="${plotRight}" y2="${plotBottom + 0.5}"/>`);
  out.push(`<line x1="${plotLeft - 0.5}" y1="${plotTop}" x2="${plotLeft - 0.5}" y2="${plotBottom}"/>`);
  for (const t of xTicks.ticks) {
    const x = r2(Math.round(px(t)) + 0.5);
    out.push(`<line x1="${x}" y1="${plotBottom}" x2="${x}" y2="${plotBottom + 5}"/>`);
  }
  for (const t of yTicks.ticks) {
    const y = r2(Math.round(py(t)) + 0.5);
    out.push(`<line x1="${plotLeft - 5}" y1="${y}" x2="${plotLeft}" y2="${y}"/>`);
  }
  out.push('</g>');
  out.push(`<g class="tick-labels" font-size="12" fill="${MUTED_TEXT}">`);
  xTicks.ticks.forEach((t, i) => {
    out.push(`<text class="tick-label tick-x" x="${r2(px(t))}" y="${plotBottom + 19}" text-anchor="middle">${escapeXml(xTickLabels[i] ?? '')}</text>`);
  });
  yTicks.ticks.forEach((t, i) => {
    out.push(`<text class="tick-label tick-y" x="${plotLeft - 9}" y="${r2(py(t) + 4)}" text-anchor="end">${escapeXml(yTickLabels[i] ?? '')}</text>`);
  });
  out.push('</g>');

  // Axis labels and title.
  out.push(
    `<text class="axis-label axis-label-x" x="${r2(plotLeft + plotW / 2)}" y="${height - 12}" text-anchor="middle" font-size="13" fill="${INK}">${escapeXml(options.xLabel)}</text>`,
  );
  const yLabelX = 17;
  const yLabelY = r2(plotTop + plotH / 2);
  out.push(
    `<text class="axis-label axis-label-y" x="${yLabelX}" y="${yLabelY}" transform="rotate(-90 ${yLabelX} ${yLabelY})" text-anchor="middle" font-size="13" fill="${INK}">${escapeXml(options.yLabel)}</text>`,
  );
  const titleText =
    titleLines.length === 1
      ? escapeXml(options.title)
      : titleLines.map((line, i) => `<tspan x="${plotLeft}" dy="${i === 0 ? 0 : 19}">${escapeXml(line)}</tspan>`).join('');
  out.push(`<text class="chart-title" x="${plotLeft}" y="24" font-size="15" font-weight="bold" fill="${INK}">${titleText}</text>`);

  // Legend: a line sample in each series' colour and dash style, then its name.
  if (legendItems.length > 0) {
    out.push('<g class="legend" font-size="12">');
    let index = 0;
    legendRows.forEach((row, r) => {
      const y = legendTop + r * legendRowHeight;
      for (const item of row) {
        const extra = extras[index - series.length];
        if (extra !== undefined) {
          out.push(legendSample(extra, item.x, y));
          out.push(`<text class="legend-label" x="${r2(item.x + 37)}" y="${y + 4}" fill="${INK}">${escapeXml(item.label)}</text>`);
          index++;
          continue;
        }
        const style = styles[index] ?? 'solid';
        const lw = series[index]?.lineWidth ?? 1.6;
        out.push(
          `<line class="legend-sample" x1="${r2(item.x)}" y1="${y}" x2="${r2(item.x + 30)}" y2="${y}" stroke="${escapeXml(colors[index] ?? INK)}" ${strokeStyleAttrs(style, Math.max(lw, 1.6))}/>`,
        );
        out.push(`<text class="legend-label" x="${r2(item.x + 37)}" y="${y + 4}" fill="${INK}">${escapeXml(item.label)}</text>`);
        index++;
      }
    });
    out.push('</g>');
  }

  out.push('</svg>');
  return out.join('\n') + '\n';
}

/** The legend's sample of a marker (a short vertical line), a point shape or a band (a shaded box). */
function legendSample(entry: ChartLegendEntry, x: number, y: number): string {
  const cx = x + 15;
  if (entry.kind === 'marker') {
    const color = escapeXml(entry.color ?? ACCENT);
    return `<line class="legend-sample legend-marker" x1="${r2(cx)}" y1="${y - 7}" x2="${r2(cx)}" y2="${y + 7}" stroke="${color}" ${strokeStyleAttrs(entry.style ?? 'solid', 1.5)}/>`;
  }
  if (entry.kind === 'band') {
    return `<rect class="legend-sample legend-band" x="${r2(x)}" y="${y - 6}" width="30" height="12" fill="${BAND_FILL}" stroke="${AXIS}" stroke-width="0.5"/>`;
  }
  const shape = entry.shape ?? 'tick';
  if (shape === 'circle') return `<circle class="legend-sample legend-point" cx="${r2(cx)}" cy="${y}" r="3.5" fill="#ffffff" stroke="${INK}" stroke-width="1.5"/>`;
  if (shape === 'triangle') {
    return `<path class="legend-sample legend-point" d="M${r2(cx)} ${y - 4.5}L${r2(cx + 4.5)} ${y + 3.5}L${r2(cx - 4.5)} ${y + 3.5}Z" fill="${INK}"/>`;
  }
  return `<line class="legend-sample legend-point" x1="${r2(cx)}" y1="${y - 6}" x2="${r2(cx)}" y2="${y + 6}" stroke="${INK}" stroke-width="1.5"/>`;
}
