import { mkdirSync, writeFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, it, expect } from 'vitest';
import fc from 'fast-check';
import { escapeXml, formatTick, niceTicks, renderChartStack, renderLineChart } from '../../src/report/index.ts';
import type { ChartOptions, ChartSeries } from '../../src/report/index.ts';

// ---------------------------------------------------------------------------------------------
// A tiny, strict XML well-formedness checker and tree builder (node: has no XML parser).
// It accepts only what a plain SVG writer should emit: one XML declaration, elements with
// double-quoted attributes, escaped text, and nothing else (no CDATA, no DOCTYPE, no comments).
// ---------------------------------------------------------------------------------------------

interface XmlNode {
  name: string;
  attrs: Map<string, string>;
  children: XmlNode[];
  text: string;
}

const NAME = '[A-Za-z_][\\w.:-]*';
const ENTITY = /&(amp|lt|gt|quot|apos);/g;
const ATTR_VALUE_OK = /^(?:[^"<&]|&(?:amp|lt|gt|quot|apos);)*$/;
const TEXT_OK = /^(?:[^<>&]|&(?:amp|lt|gt|quot|apos);)*$/;
const OPEN_TAG = new RegExp(`^<(${NAME})((?:\\s+${NAME}="[^"]*")*)\\s*(/?)>$`);
const CLOSE_TAG = new RegExp(`^</(${NAME})\\s*>$`);
const ATTR = new RegExp(`(${NAME})="([^"]*)"`, 'g');

function unescape(s: string): string {
  const map: Record<string, string> = { amp: '&', lt: '<', gt: '>', quot: '"', apos: "'" };
  return s.replace(ENTITY, (_m, e: string) => map[e] ?? '');
}

function parseXml(doc: string): XmlNode {
  const decl = /^<\?xml version="1\.0" encoding="UTF-8"\?>\n/;
  if (!decl.test(doc)) throw new Error('missing XML declaration');
  const body = doc.replace(decl, '');
  const token = /<[^<>]*>|[^<]+/g;
  const stack: XmlNode[] = [];
  let root: XmlNode | null = null;
  let consumed = 0;
  for (const m of body.matchAll(token)) {
    if (m.index !== consumed) throw new Error(`stray '<' at ${consumed}`);
    consumed += m[0].length;
    const t = m[0];
    if (!t.startsWith('<')) {
      if (!TEXT_OK.test(t)) throw new Error(`unescaped text: ${JSON.stringify(t.slice(0, 40))}`);
      const top = stack[stack.length - 1];
      if (top === undefined) {
        if (t.trim() !== '') throw new Error('text outside the root element');
      } else top.text += unescape(t);
      continue;
    }
    const close = CLOSE_TAG.exec(t);
    if (close) {
      const top = stack.pop();
      if (top === undefined || top.name !== close[1]) throw new Error(`mismatched </${close[1]}>`);
      continue;
    }
    const open = OPEN_TAG.exec(t);
    if (!open) throw new Error(`malformed tag: ${t.slice(0, 60)}`);
    const node: XmlNode = { name: open[1] ?? '', attrs: new Map(), children: [], text: '' };
    for (const a of (open[2] ?? '').matchAll(ATTR)) {
      const [, key = '', value = ''] = a;
      if (node.attrs.has(key)) throw new Error(`duplicate attribute ${key} in <${node.name}>`);
      if (!ATTR_VALUE_OK.test(value)) throw new Error(`unescaped attribute ${key}="${value}"`);
      node.attrs.set(key, unescape(value));
    }
    const parent = stack[stack.length - 1];
    if (parent === undefined) {
      if (root !== null) throw new Error('more than one root element');
      root = node;
    } else parent.children.push(node);
    if (open[3] !== '/') stack.push(node);
  }
  if (consumed !== body.length) throw new Error('trailing garbage');
  if (stack.length > 0) throw new Error(`unclosed <${stack[stack.length - 1]?.name}>`);
  if (root === null) throw new Error('no root element');
  return root;
}

function findAll(node: XmlNode, pred: (n: XmlNode) => boolean, out: XmlNode[] = []): XmlNode[] {
  if (pred(node)) out.push(node);
  for (const c of node.children) findAll(c, pred, out);
  return out;
}

const byClass = (root: XmlNode, cls: string): XmlNode[] =>
  findAll(root, (n) => (n.attrs.get('class') ?? '').split(/\s+/).includes(cls));

function num(n: XmlNode, attr: string): number {
  const v = n.attrs.get(attr);
  if (v === undefined) throw new Error(`<${n.name}> has no ${attr}`);
  return Number(v);
}

/** Coordinate pairs of a path's d attribute (M/L commands; the lone-point "l0 0" is skipped). */
function pathPoints(d: string): [number, number][] {
  return [...d.matchAll(/[ML](-?[\d.]+) (-?[\d.]+)/g)].map((m) => [Number(m[1]), Number(m[2])]);
}

/** Tick-label text back to a number (typographic minus, optional %). */
function labelValue(text: string): number {
  return Number(text.replace('\u2212', '-').replace('%', ''));
}

function plotArea(root: XmlNode): { left: number; top: number; right: number; bottom: number } {
  const [r] = byClass(root, 'plot-area');
  if (r === undefined) throw new Error('no plot-area');
  const left = num(r, 'x');
  const top = num(r, 'y');
  return { left, top, right: left + num(r, 'width'), bottom: top + num(r, 'height') };
}

const baseOptions: ChartOptions = { title: 'Layer trace', xLabel: 'Thickness (nm)', yLabel: 'Signal (%)' };

function ramp(n: number, f: (i: number) => number): { x: Float64Array; y: Float64Array } {
  const x = new Float64Array(n);
  const y = new Float64Array(n);
  for (let i = 0; i < n; i++) {
    x[i] = i;
    y[i] = f(i);
  }
  return { x, y };
}

describe('the well-formedness checker used by these tests', () => {
  it('rejects broken documents, so a pass below means something', () => {
    const d = '<?xml version="1.0" encoding="UTF-8"?>\n';
    expect(() => parseXml(`${d}<svg><g></svg>`)).toThrow();
    expect(() => parseXml(`${d}<svg><g>`)).toThrow();
    expect(() => parseXml(`${d}<svg>R & T</svg>`)).toThrow();
    expect(() => parseXml(`${d}<svg a="1" a="2"/>`)).toThrow();
    expect(() => parseXml(`${d}<svg a="x<y"/>`)).toThrow();
    expect(() => parseXml(`${d}<svg/><svg/>`)).toThrow();
    expect(() => parseXml(`${d}<svg a=1/>`)).toThrow();
    expect(parseXml(`${d}<svg a="&amp;"><g/>R &amp; T</svg>`).text).toBe('R & T');
  });
});

describe('renderLineChart', () => {
  const measured = ramp(50, (i) => 0.3 + 0.2 * Math.sin(i / 8));
  const model = ramp(50, (i) => 0.31 + 0.2 * Math.sin(i / 8));

  it('writes a standalone SVG 1.1 document with size, viewBox and a white background', () => {
    const svg = renderLineChart([{ label: 'measured', ...measured }], { ...baseOptions, width: 640, height: 400 });
    const root = parseXml(svg);
    expect(root.name).toBe('svg');
    expect(root.attrs.get('xmlns')).toBe('http://www.w3.org/2000/svg');
    expect(root.attrs.get('version')).toBe('1.1');
    expect(root.attrs.get('width')).toBe('640');
    expect(root.attrs.get('height')).toBe('400');
    expect(root.attrs.get('viewBox')).toBe('0 0 640 400');
    const bg = root.children.find((c) => c.name === 'rect');
    expect(bg?.attrs.get('fill')).toBe('#ffffff');
    expect(bg?.attrs.get('width')).toBe('640');
  });

  it('shows the title, axis labels and one legend entry per series', () => {
    const root = parseXml(renderLineChart([{ label: 'measured', ...measured }, { label: 'model', ...model }], baseOptions));
    expect(byClass(root, 'chart-title')[0]?.text).toBe('Layer trace');
    expect(byClass(root, 'axis-label-x')[0]?.text).toBe('Thickness (nm)');
    expect(byClass(root, 'axis-label-y')[0]?.text).toBe('Signal (%)');
    expect(byClass(root, 'legend-label').map((n) => n.text)).toEqual(['measured', 'model']);
    expect(byClass(root, 'legend-sample')).toHaveLength(2);
  });

  it('gives series distinct dash styles by default, and the legend sample matches its line', () => {
    const four: ChartSeries[] = ['a', 'b', 'c', 'd'].map((label, k) => ({ label, ...ramp(10, (i) => i + k) }));
    const root = parseXml(renderLineChart(four, baseOptions));
    const lines = byClass(root, 'series-line');
    const samples = byClass(root, 'legend-sample');
    const dashes = lines.map((l) => l.attrs.get('stroke-dasharray') ?? 'none');
    expect(new Set(dashes).size).toBe(4);
    expect(dashes[0]).toBe('none'); // first series solid
    expect(samples.map((s) => s.attrs.get('stroke-dasharray') ?? 'none')).toEqual(dashes);
    expect(samples.map((s) => s.attrs.get('stroke'))).toEqual(lines.map((l) => l.attrs.get('stroke')));
    expect(new Set(lines.map((l) => l.attrs.get('stroke'))).size).toBe(4);
  });

  it('honours a given style and colour, escaping the colour attribute', () => {
    const svg = renderLineChart([{ label: 'x', ...measured, style: 'dotted', color: '#123456' }], baseOptions);
    const [line] = byClass(parseXml(svg), 'series-line');
    expect(line?.attrs.get('stroke')).toBe('#123456');
    expect(line?.attrs.get('stroke-dasharray')).toBeDefined();
    const evil = renderLineChart([{ label: 'x', ...measured, color: 'red" onload="x' }], baseOptions);
    expect(evil).not.toContain('onload="x"');
    expect(() => parseXml(evil)).not.toThrow();
  });

  it('escapes every text for XML', () => {
    const nasty = 'R & T <%>';
    const svg = renderLineChart([{ label: `${nasty} "q" 'a'`, ...measured }], {
      title: nasty,
      xLabel: nasty,
      yLabel: nasty,
      markers: [{ x: 20, label: nasty }],
      points: [{ x: 10, y: 0.4, label: nasty }],
      hLines: [{ y: 0.35, label: nasty }],
      bands: [{ from: 30, to: 35, label: nasty }],
    });
    expect(svg).not.toContain(nasty);
    // title element, visible title, 2 axis labels, legend, marker, point, hline, band
    expect(svg.split('R &amp; T &lt;%&gt;').length - 1).toBe(9);
    expect(svg).toContain('&quot;q&quot; &apos;a&apos;');
    expect(() => parseXml(svg)).not.toThrow();
    expect(escapeXml('a\u0001b')).toBe('ab');
  });

  it('breaks the line at non-finite values: segments = 1 + interior gaps', () => {
    const value = fc.oneof(
      { weight: 3, arbitrary: fc.double({ min: -1e3, max: 1e3, noNaN: true }) },
      { weight: 1, arbitrary: fc.constantFrom(NaN, Infinity, -Infinity) },
    );
    fc.assert(
      fc.property(fc.array(value, { minLength: 1, maxLength: 80 }), (ys) => {
        const finite = ys.map((v) => Number.isFinite(v));
        const firstFinite = finite.indexOf(true);
        fc.pre(firstFinite >= 0);
        const lastFinite = finite.lastIndexOf(true);
        let gaps = 0;
        for (let i = firstFinite + 1; i <= lastFinite; i++) if (finite[i] && !finite[i - 1]) gaps++;
        const svg = renderLineChart([{ label: 's', x: ys.map((_v, i) => i), y: ys }], baseOptions);
        const lines = byClass(parseXml(svg), 'series-line');
        expect(lines).toHaveLength(1 + gaps);
        const drawn = lines.reduce((sum, l) => sum + pathPoints(l.attrs.get('d') ?? '').length, 0);
        expect(drawn).toBe(finite.filter(Boolean).length);
      }),
      { numRuns: 200 },
    );
  });

  it('also breaks the line at a non-finite x', () => {
    const svg = renderLineChart([{ label: 's', x: [0, 1, NaN, 3, 4], y: [1, 2, 3, 4, 5] }], baseOptions);
    expect(byClass(parseXml(svg), 'series-line')).toHaveLength(2);
  });

  it('maps data to the plot area exactly when ranges are given', () => {
    const svg = renderLineChart([{ label: 's', x: [0, 10], y: [0, 1] }], { ...baseOptions, xRange: [0, 10], yRange: [0, 1] });
    const root = parseXml(svg);
    const area = plotArea(root);
    const [line] = byClass(root, 'series-line');
    const pts = pathPoints(line?.attrs.get('d') ?? '');
    expect(pts).toEqual([
      [area.left, area.bottom],
      [area.right, area.top],
    ]);
  });

  it('pads auto ranges so the data sit inside the plot, not on its edges', () => {
    const root = parseXml(renderLineChart([{ label: 's', ...measured }], baseOptions));
    const area = plotArea(root);
    const pts = byClass(root, 'series-line').flatMap((l) => pathPoints(l.attrs.get('d') ?? ''));
    for (const [x, y] of pts) {
      expect(x).toBeGreaterThan(area.left);
      expect(x).toBeLessThan(area.right);
      expect(y).toBeGreaterThan(area.top);
      expect(y).toBeLessThan(area.bottom);
    }
  });

  it('writes coordinates with at most 2 decimals', () => {
    const svg = renderLineChart([{ label: 's', ...ramp(300, (i) => Math.sqrt(i) / 7.3) }], baseOptions);
    for (const line of byClass(parseXml(svg), 'series-line')) {
      for (const token of (line.attrs.get('d') ?? '').split(/[MLl ]+/).filter((t) => t !== '')) {
        expect(token).toMatch(/^-?\d+(\.\d{1,2})?$/);
      }
    }
  });

  it('labels axes with evenly spaced nice ticks inside the range', () => {
    const root = parseXml(
      renderLineChart([{ label: 's', x: [3.7, 141.2], y: [-0.013, 0.0871] }], { ...baseOptions, xRange: [3.7, 141.2], yRange: [-0.013, 0.0871] }),
    );
    for (const [cls, lo, hi] of [
      ['tick-x', 3.7, 141.2],
      ['tick-y', -0.013, 0.0871],
    ] as const) {
      const values = byClass(root, cls).map((n) => labelValue(n.text));
      expect(values.length).toBeGreaterThanOrEqual(3);
      const step = (values[1] ?? NaN) - (values[0] ?? NaN);
      values.forEach((v, i) => {
        expect(v).toBeGreaterThanOrEqual(lo);
        expect(v).toBeLessThanOrEqual(hi);
        if (i > 0) expect(v - (values[i - 1] ?? NaN)).toBeCloseTo(step, 9);
      });
      const mantissa = step / 10 ** Math.floor(Math.log10(step) + 1e-9);
      expect([1, 2, 5].some((m) => Math.abs(mantissa - m) < 1e-9)).toBe(true);
    }
  });

  it('shows percent tick labels when yPercent is set', () => {
    const root = parseXml(renderLineChart([{ label: 's', x: [0, 1], y: [0, 1] }], { ...baseOptions, yPercent: true }));
    const labels = byClass(root, 'tick-y').map((n) => n.text);
    expect(labels.length).toBeGreaterThanOrEqual(3);
    for (const l of labels) expect(l).toMatch(/^\u2212?\d+(\.\d+)?%$/);
    expect(labels).toContain('0%');
    expect(labels).toContain('100%');
    expect(byClass(root, 'tick-x').every((n) => !n.text.endsWith('%'))).toBe(true);
  });

  it('draws markers, points, horizontal lines and bands, leaving out those off the plot', () => {
    const root = parseXml(
      renderLineChart([{ label: 's', ...measured }], {
        ...baseOptions,
        xRange: [0, 49],
        markers: [{ x: 40, label: 'cut' }, { x: 500, label: 'off-plot' }],
        points: [
          { x: 12, y: 0.5, label: 'TP1' },
          { x: 30, y: 0.2, shape: 'circle' },
          { x: 35, y: 0.25, shape: 'triangle' },
        ],
        hLines: [{ y: 0.45, label: 'trigger' }],
        bands: [{ from: 38, to: 42, label: 'window' }, { from: 0.15, to: 0.2, axis: 'y' }],
      }),
    );
    const area = plotArea(root);
    const marker = byClass(root, 'marker');
    expect(marker).toHaveLength(1);
    expect(num(marker[0] as XmlNode, 'y1')).toBe(area.top);
    expect(num(marker[0] as XmlNode, 'y2')).toBe(area.bottom);
    expect(byClass(root, 'marker-label').map((n) => n.text)).toEqual(['cut']);
    expect(byClass(root, 'point-tick')).toHaveLength(1);
    expect(byClass(root, 'point-circle')).toHaveLength(1);
    expect(byClass(root, 'point-triangle')).toHaveLength(1);
    expect(byClass(root, 'point-label').map((n) => n.text)).toEqual(['TP1']);
    const [hline] = byClass(root, 'hline');
    expect(num(hline as XmlNode, 'x1')).toBe(area.left);
    expect(num(hline as XmlNode, 'x2')).toBe(area.right);
    expect(byClass(root, 'hline-label')[0]?.text).toBe('trigger');
    const bands = byClass(root, 'band');
    expect(bands).toHaveLength(2);
    expect(num(bands[0] as XmlNode, 'height')).toBe(area.bottom - area.top); // x-band spans the height
    expect(num(bands[1] as XmlNode, 'width')).toBe(area.right - area.left); // y-band spans the width
    expect(byClass(root, 'band-label')[0]?.text).toBe('window');
  });

  it('includes markers and points in an auto range', () => {
    const root = parseXml(renderLineChart([{ label: 's', x: [0, 10], y: [0, 1] }], { ...baseOptions, markers: [{ x: 25 }] }));
    const area = plotArea(root);
    const [marker] = byClass(root, 'marker');
    expect(marker).toBeDefined();
    expect(num(marker as XmlNode, 'x1')).toBeLessThan(area.right);
  });

  it('renders 20,000 points quickly', () => {
    const big = ramp(20_000, (i) => Math.sin(i / 500) + (i % 7) * 1e-3);
    const t0 = performance.now();
    const svg = renderLineChart([{ label: 'measured', ...big }], baseOptions);
    const ms = performance.now() - t0;
    expect(ms).toBeLessThan(500); // generous: it takes a few tens of ms; a quadratic build would not pass
    const [line] = byClass(parseXml(svg), 'series-line');
    expect(pathPoints(line?.attrs.get('d') ?? '')).toHaveLength(20_000);
  });

  it('draws a lone finite point as a dot', () => {
    const svg = renderLineChart([{ label: 's', x: [0, 1, 2, 3], y: [1, NaN, 2, NaN] }], baseOptions);
    const lines = byClass(parseXml(svg), 'series-line');
    expect(lines).toHaveLength(2);
    expect(lines[1]?.attrs.get('d')).toMatch(/^M[\d.]+ [\d.]+ l0 0$/);
    expect(lines[1]?.attrs.get('stroke-linecap')).toBe('round');
  });

  it('copes with no series, flat data and no finite data', () => {
    expect(() => parseXml(renderLineChart([], baseOptions))).not.toThrow();
    const flat = parseXml(renderLineChart([{ label: 'flat', x: [0, 1, 2], y: [0.5, 0.5, 0.5] }], baseOptions));
    expect(byClass(flat, 'tick-y').length).toBeGreaterThanOrEqual(2);
    const none = parseXml(renderLineChart([{ label: 'none', x: [0, 1], y: [NaN, NaN] }], baseOptions));
    expect(byClass(none, 'series-line')).toHaveLength(0);
  });

  it('finds a usable auto range for extreme data', () => {
    for (const y of [[-5e-324, -5e-324], [1, 1 + 2.2e-16], [-1e308, 1e308], [1e300, 1e300], [Number.MAX_VALUE, 0]]) {
      const root = parseXml(renderLineChart([{ label: 's', x: [0, 1], y }], baseOptions));
      const values = byClass(root, 'tick-y').map((n) => labelValue(n.text));
      expect(values.length).toBeGreaterThanOrEqual(2);
      values.forEach((v, i) => {
        expect(Number.isFinite(v)).toBe(true);
        if (i > 0) expect(v).toBeGreaterThan(values[i - 1] ?? NaN);
      });
    }
  });

  it('rejects bad options, naming them', () => {
    expect(() => renderLineChart([], { ...baseOptions, xRange: [1, 1] })).toThrow(/xRange/);
    expect(() => renderLineChart([], { ...baseOptions, yRange: [0, NaN] })).toThrow(/yRange/);
    expect(() => renderLineChart([], { ...baseOptions, yRange: [1, 1 + 4e-16] })).toThrow(/yRange/);
    expect(() => renderLineChart([], { ...baseOptions, width: NaN })).toThrow(/width/);
    expect(() => renderLineChart([], { ...baseOptions, height: 10 })).toThrow(/height/);
    expect(() => renderLineChart([{ label: 'bad', x: [1, 2], y: [1] }], baseOptions)).toThrow(/bad/);
  });

  it('writes an example chart to test/artifacts for a look by eye', () => {
    // Invented scenario: a high-index layer watched at one wavelength, with a short signal
    // dropout, the model's prediction, the predicted cut and the trigger level.
    const n = 1500;
    const thick = new Float64Array(n);
    const signal = new Float64Array(n);
    const predicted = new Float64Array(n);
    let seed = 12345;
    const noise = (): number => {
      seed = (seed * 1103515245 + 12345) % 2147483648;
      return seed / 2147483648 - 0.5;
    };
    for (let i = 0; i < n; i++) {
      const d = (i / (n - 1)) * 128;
      thick[i] = d;
      predicted[i] = 0.36 + 0.17 * (1 - Math.cos((2 * Math.PI * d) / 120));
      signal[i] = d > 71 && d < 74.5 ? NaN : predicted[i]! - 0.008 + 0.006 * noise() + 0.01 * Math.sin(d / 9);
    }
    const svg = renderLineChart(
      [
        { label: 'Measured', x: thick, y: signal },
        { label: 'Model (this layer)', x: thick, y: predicted, lineWidth: 1.2 },
      ],
      {
        title: 'Layer 3 of 7 · high index · monitor 550 nm',
        xLabel: 'Thickness of this layer (nm)',
        yLabel: 'Signal (%)',
        yPercent: true,
        markers: [{ x: 120, label: 'predicted cut 120.0 nm' }],
        points: [{ x: 60, y: 0.7, label: 'turning point' }],
        hLines: [{ y: 0.38, label: 'trigger 38.0%' }],
        bands: [{ from: 71, to: 74.5, label: 'signal lost' }],
      },
    );
    expect(() => parseXml(svg)).not.toThrow();
    const dir = fileURLToPath(new URL('../artifacts/', import.meta.url));
    mkdirSync(dir, { recursive: true });
    writeFileSync(`${dir}svg-chart-example.svg`, svg);
  });
});

describe('niceTicks', () => {
  it('covers any range with evenly spaced 1-2-5 ticks', () => {
    fc.assert(
      fc.property(
        fc.double({ min: -1e5, max: 1e5, noNaN: true }),
        fc.double({ min: -6, max: 6, noNaN: true }),
        fc.integer({ min: 2, max: 12 }),
        (min, logSpan, target) => {
          const max = min + 10 ** logSpan;
          fc.pre(max > min);
          const { step, ticks } = niceTicks(min, max, target);
          const mantissa = step / 10 ** Math.floor(Math.log10(step) + 1e-12);
          expect([1, 2, 5].some((m) => Math.abs(mantissa - m) < 1e-9)).toBe(true);
          expect(ticks.length).toBeGreaterThanOrEqual(2);
          expect(ticks.length).toBeLessThanOrEqual(target + 3);
          // Tolerance: a millionth of a step, or a few ulps of the largest value when the span is
          // tiny beside the values themselves (Float64 cannot do better).
          const tol = Math.max(step * 1e-6, 8 * Number.EPSILON * Math.max(Math.abs(min), Math.abs(max)));
          ticks.forEach((t, i) => {
            if (i === 0) return;
            const prev = ticks[i - 1] ?? NaN;
            expect(t).toBeGreaterThan(prev);
            expect(Math.abs(t - prev - step)).toBeLessThan(tol);
          });
          // Each tick is a whole multiple of the step.
          for (const t of ticks) expect(Math.abs(t - Math.round(t / step) * step)).toBeLessThan(tol);
          expect(ticks[0]).toBeLessThanOrEqual(min + tol);
          expect(ticks[ticks.length - 1]).toBeGreaterThanOrEqual(max - tol);
          // Covering, but not overshooting by a whole step on either side.
          expect(ticks[0]).toBeGreaterThan(min - step - tol);
          expect(ticks[ticks.length - 1]).toBeLessThan(max + step + tol);
        },
      ),
      { numRuns: 500 },
    );
  });

  it('gives decimal ticks without float noise', () => {
    const { ticks } = niceTicks(0.1, 0.7, 6);
    expect(ticks).toEqual([0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7]);
  });

  it('rejects an empty, non-finite or unresolvably fine range', () => {
    expect(() => niceTicks(1, 1)).toThrow(RangeError);
    expect(() => niceTicks(0, Infinity)).toThrow(RangeError);
    expect(() => niceTicks(1, 1 + 4e-16)).toThrow(RangeError);
  });
});

describe('formatTick', () => {
  it('uses the decimals the step needs, a typographic minus, and % when asked', () => {
    expect(formatTick(0.30000000000000004, 0.1)).toBe('0.3');
    expect(formatTick(-20, 10)).toBe('\u221220');
    expect(formatTick(0.25, 0.05, true)).toBe('25%');
    expect(formatTick(0.125, 0.005, true)).toBe('12.5%');
    expect(formatTick(3e8, 1e8)).toBe('3e+8');
    expect(formatTick(1e-16, 0.1)).toBe('0');
  });
});

describe('log axis, long titles, legend entries for marks, stacked panels', () => {
  it('draws y on decades: equal ratios are equal distances, ticks 1-2-5 per decade, values ≤ 0 break the line', () => {
    const svg = renderLineChart([{ label: 'error', x: [1, 2, 3, 4], y: [0.01, 0.1, 1, 0] }], { ...baseOptions, yLog: true });
    const root = parseXml(svg);
    const labels = byClass(root, 'tick-y').map((n) => n.text);
    expect(labels).toContain('0.01');
    expect(labels).toContain('0.1');
    expect(labels).toContain('1');
    expect(labels).toContain('0.2');
    const [line] = byClass(root, 'series-line');
    const pts = pathPoints(line?.attrs.get('d') ?? '');
    // Three points drawn (the 0 cannot be), one decade apart each.
    expect(pts).toHaveLength(3);
    const [a, b, c] = pts.map((p) => p[1]) as [number, number, number];
    expect(a - b).toBeCloseTo(b - c, 1);
    expect(a - b).toBeGreaterThan(20);
  });

  it('wraps a title wider than the chart onto lines that fit, and moves the plot down for them', () => {
    const title = 'Edge filter 600 nm, levels on two chips: n·d error per layer, 50 runs per strategy, typical chamber';
    const root = parseXml(renderLineChart([{ label: 'a', ...ramp(5, (i) => i) }], { ...baseOptions, title, width: 500 }));
    const [heading] = byClass(root, 'chart-title');
    const lines = (heading?.children ?? []).filter((c) => c.name === 'tspan').map((t) => t.text);
    expect(lines.length).toBeGreaterThan(1);
    expect(lines.join(' ')).toBe(title);
    const left = plotArea(root).left;
    for (const line of lines) expect(left + line.length * 15 * 0.6).toBeLessThanOrEqual(500);
    const short = parseXml(renderLineChart([{ label: 'a', ...ramp(5, (i) => i) }], { ...baseOptions, width: 500 }));
    expect(plotArea(root).top).toBeGreaterThan(plotArea(short).top);
  });

  it('lists markers, points and bands in the legend after the series, each with its own sample', () => {
    const root = parseXml(
      renderLineChart([{ label: 'signal', ...ramp(5, (i) => i) }], {
        ...baseOptions,
        markers: [{ x: 2 }],
        legend: [
          { label: 'cut', kind: 'marker' },
          { label: 'turning point', kind: 'point', shape: 'tick' },
          { label: 'chip', kind: 'band' },
        ],
      }),
    );
    expect(byClass(root, 'legend-label').map((n) => n.text)).toEqual(['signal', 'cut', 'turning point', 'chip']);
    expect(byClass(root, 'legend-marker')).toHaveLength(1);
    expect(byClass(root, 'legend-point')).toHaveLength(1);
    expect(byClass(root, 'legend-band')).toHaveLength(1);
  });

  it('an unshaded band keeps its label and draws no strip', () => {
    const root = parseXml(renderLineChart([{ label: 's', ...ramp(5, (i) => i) }], { ...baseOptions, bands: [{ from: 0, to: 2, label: 'A' }, { from: 2, to: 4, label: 'B', shaded: false }] }));
    expect(byClass(root, 'band')).toHaveLength(1);
    expect(byClass(root, 'band-label').map((n) => n.text)).toEqual(['A', 'B']);
  });

  it('stacks panels in one well-formed document, each clipped to its own plot', () => {
    const svg = renderChartStack([
      { series: [{ label: 'R', ...ramp(5, (i) => i) }], options: { ...baseOptions, title: 'R', height: 300 } },
      { series: [{ label: 'T', ...ramp(5, (i) => 5 - i) }], options: { ...baseOptions, title: 'T', height: 300 } },
    ]);
    const root = parseXml(svg);
    expect(root.attrs.get('height')).toBe('600');
    const panels = root.children.filter((c) => c.name === 'svg');
    expect(panels.map((p) => p.attrs.get('y') ?? '0')).toEqual(['0', '300']);
    const clips = findAll(root, (n) => n.name === 'clipPath').map((n) => n.attrs.get('id'));
    expect(new Set(clips).size).toBe(2);
    expect(() => renderChartStack([])).toThrow(/at least one panel/);
  });
});
