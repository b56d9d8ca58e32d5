/**
 * A run's report as one self-contained HTML page: inline CSS, inline SVG charts, no script, no
 * request for anything else, so that it opens from a file, prints to PDF from the browser and
 * can be mailed. Pure: the page is a string. Every text from a file or the journal is escaped.
 */
import { createHash } from 'node:crypto';
import { escapeXml, renderLineChart, type ChartOptions, type ChartSeries } from '../report/index.ts';
import { describeDamage } from '../journal/journal-reader.ts';
import type { RunReport, ReportTrace } from './run-report.ts';

const STYLE = `
:root { color: #1d2733; background: #fff; font: 14px/1.45 'DejaVu Sans', 'Helvetica Neue', Helvetica, Arial, sans-serif; }
body { margin: 1.5rem auto; max-width: 1100px; padding: 0 1rem; }
h1 { font-size: 1.5rem; margin: 0 0 .25rem; }
h2 { font-size: 1.15rem; margin: 1.75rem 0 .5rem; border-bottom: 1px solid #c9ced4; padding-bottom: .2rem; }
h3 { font-size: 1rem; margin: 1rem 0 .4rem; }
.sub { color: #4a525c; margin: 0; }
.safety { color: #4a525c; font-size: .85rem; }
table { border-collapse: collapse; margin: .25rem 0 .75rem; }
th, td { border-bottom: 1px solid #e3e6ea; padding: .2rem .55rem; text-align: left; vertical-align: top; }
th { background: #f3f5f7; font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
dl { display: grid; grid-template-columns: max-content 1fr; gap: .15rem 1rem; margin: .25rem 0; }
dt { color: #4a525c; }
dd { margin: 0; }
pre { background: #f3f5f7; padding: .5rem; overflow-x: auto; font-size: .8rem; white-space: pre-wrap; }
.severity-critical { color: #9c2b1c; font-weight: 600; }
.severity-warning { color: #7a5200; }
.traces { display: grid; grid-template-columns: repeat(auto-fill, minmax(320px, 1fr)); gap: .75rem; }
figure { margin: 0; break-inside: avoid; page-break-inside: avoid; }
figcaption { font-size: .85rem; color: #4a525c; }
svg { max-width: 100%; height: auto; }
.wide { overflow-x: auto; }
@media print {
  :root { font-size: 10pt; }
  body { margin: 0; max-width: none; }
  h2 { break-after: avoid; page-break-after: avoid; }
  tr { break-inside: avoid; page-break-inside: avoid; }
  .traces { grid-template-columns: repeat(3, 1fr); }
}
@page { size: A4; margin: 14mm; }
`;

/** The page's content security policy: its one style element by hash, its SVG inline, nothing fetched, nothing run. */
export const REPORT_CONTENT_SECURITY_POLICY = [
  "default-src 'none'",
  `style-src 'sha256-${createHash('sha256').update(STYLE).digest('base64')}'`,
  "img-src data:",
  "base-uri 'none'",
  "form-action 'none'",
  "frame-ancestors 'none'",
].join('; ');

const h = escapeXml;

export function renderRunReport(report: RunReport): string {
  const { recipe, header } = report;
  const title = `Run report: ${recipe.name}`;
  const parts: string[] = [];
  parts.push(
    '<!DOCTYPE html>',
    '<html lang="en">',
    '<head>',
    '<meta charset="utf-8">',
    '<meta name="viewport" content="width=device-width, initial-scale=1">',
    `<title>${h(title)} (${h(report.id)})</title>`,
    `<style>${STYLE}</style>`,
    '</head>',
    '<body>',
    `<h1>${h(title)}</h1>`,
    `<p class="sub">run ${h(report.id)}, started ${h(header.startedAt)}, ${h(outcomeOf(report))}, ${h(clock(report.durationS))} of run time</p>`,
  );
  const damage = describeDamage('journal.ndjson', report.damage);
  if (damage !== null) parts.push(`<p><strong>The journal is damaged</strong> (${h(damage)}); the figures below are what the rest shows.</p>`);
  parts.push(recipeSection(report), chamberSection(report), layersSection(report), alertsSection(report), tracesSection(report), rateSection(report), outcomeSection(report));
  if (report.calibration !== undefined) parts.push(calibrationSection(report.calibration));
  parts.push(
    '<p class="safety">fringe is process control, not a safety system: interlocks, manual shutter controls and the equipment maker’s instructions stay in charge.</p>',
    '</body>',
    '</html>',
  );
  return `${parts.join('\n')}\n`;
}

function outcomeOf(report: RunReport): string {
  const summary = report.summary?.outcome;
  if (typeof summary === 'string') return summary;
  return 'no summary (the run did not end, or ended before writing one)';
}

function recipeSection(report: RunReport): string {
  const { recipe, header } = report;
  const design = recipe.design;
  const estimator = header.meta.estimator === 'fit' ? 'the model fit (fit)' : 'the plain rules (plain)';
  const rows: [string, string][] = [
    ['recipe', recipe.name],
    ['design', design.name],
    ['incident medium', design.incidentName],
    ['substrate', design.substrateName],
    ['layers', String(recipe.layers.length)],
    ['band', design.band ? `${design.band.fromNm}–${design.band.toNm} nm` : '–'],
    ['witness chips', recipe.chips.map((c) => `${c.label} from layer ${c.fromLayer}`).join('; ')],
    ['optical layers cut by', estimator],
    ['monitor', `${recipe.monitor.rangeNm[0]}–${recipe.monitor.rangeNm[1]} nm`],
  ];
  const materials = new Map<string, (typeof recipe.layers)[number]>();
  for (const layer of recipe.layers) if (!materials.has(layer.materialName)) materials.set(layer.materialName, layer);
  const process = [...materials.values()].map(
    (l) =>
      `<tr><td>${h(l.materialName)}</td><td class="num">${fixed(l.rateNmPerS, 3)}</td><td class="num">${fixed(l.rateBandPercent, 1)}</td><td class="num">${fixed(l.toolingFactor, 4)}</td><td class="num">${fixed(l.chipRatio, 4)}</td><td class="num">${fixed(l.densityGPerCm3, 3)}</td><td class="num">${fixed(l.zRatio, 3)}</td></tr>`,
  );
  return [
    '<h2>Recipe</h2>',
    definitionList(rows),
    '<h3>Process per material</h3>',
    '<table><thead><tr><th>material</th><th class="num">rate nm/s</th><th class="num">rate band ±%</th><th class="num">tooling</th><th class="num">chip ratio</th><th class="num">density g/cm³</th><th class="num">Z-ratio</th></tr></thead>',
    `<tbody>${process.join('')}</tbody></table>`,
  ].join('\n');
}

function chamberSection(report: RunReport): string {
  const meta = Object.entries(report.header.meta).filter(([, v]) => v === null || ['string', 'number', 'boolean'].includes(typeof v));
  const out = ['<h2>Chamber</h2>'];
  out.push(definitionList(meta.map(([k, v]) => [k, String(v)])));
  if (report.chamberText !== null) out.push('<h3>Chamber file as run</h3>', `<pre>${h(report.chamberText)}</pre>`);
  else if (report.header.meta.source === 'simulator') out.push('<p>The virtual chamber (simulator profile and seed above).</p>');
  return out.join('\n');
}

function layersSection(report: RunReport): string {
  const summaryLayers = Array.isArray(report.summary?.layers) ? (report.summary.layers as Record<string, unknown>[]) : [];
  const hasTrue = summaryLayers.some((l) => typeof l.trueNm === 'number');
  const rows = report.rows.map((row) => {
    const recorded = summaryLayers.find((l) => l.number === row.number);
    const trueNm = typeof recorded?.trueNm === 'number' ? recorded.trueNm : null;
    // The simulator's own summary (fringe simulate) and the dashboard's name the true error differently: it is derived here.
    const trueError = trueNm === null ? null : (100 * (trueNm - row.targetNm)) / row.targetNm;
    const cut = row.skipped ? 'skipped' : (row.cutReason ?? (row.status === 'future' ? 'not reached' : 'not cut'));
    return (
      `<tr><td class="num">${row.number}</td><td>${h(row.material)}</td><td>${h(row.chip)}</td><td class="num">${fixed(row.wavelengthNm, 1)}</td><td>${h(row.cut)}</td>` +
      `<td class="num">${fixed(row.targetNm, 2)}</td><td>${h(cut)}</td><td class="num">${fixed(row.estimatedNm, 2)}</td><td class="num">${fixed(row.errorNm, 2)}</td><td class="num">${fixed(row.errorPercent, 2)}</td>` +
      (hasTrue ? `<td class="num">${fixed(trueNm, 2)}</td><td class="num">${fixed(trueError, 2)}</td>` : '') +
      '</tr>'
    );
  });
  return [
    '<h2>Layers</h2>',
    '<p class="sub">Per layer: the target on the parts, how it was cut, the estimated thickness achieved and its error against the target' +
      (hasTrue ? '; for a simulated run also what the virtual chamber really deposited.' : '.') +
      '</p>',
    '<div class="wide"><table><thead><tr><th class="num">#</th><th>material</th><th>chip</th><th class="num">λ nm</th><th>cut mode</th><th class="num">target nm</th><th>cut by</th><th class="num">estimate nm</th><th class="num">error nm</th><th class="num">error %</th>' +
      (hasTrue ? '<th class="num">true nm</th><th class="num">true error %</th>' : '') +
      '</tr></thead>',
    `<tbody>${rows.join('')}</tbody></table></div>`,
  ].join('\n');
}

function alertsSection(report: RunReport): string {
  if (report.alerts.length === 0) return '<h2>Alerts</h2>\n<p>None.</p>';
  const rows = report.alerts.map(
    (a) => `<tr><td class="num">${h(clock(a.timeS))}</td><td class="severity-${h(a.severity)}">${h(a.severity)}</td><td>${h(a.code)}</td><td class="num">${a.layer ?? '–'}</td><td>${h(a.message)}</td></tr>`,
  );
  return ['<h2>Alerts</h2>', '<div class="wide"><table><thead><tr><th class="num">run time</th><th>severity</th><th>code</th><th class="num">layer</th><th>message</th></tr></thead>', `<tbody>${rows.join('')}</tbody></table></div>`].join('\n');
}

function tracesSection(report: RunReport): string {
  if (report.traces.length === 0) return '<h2>Traces</h2>\n<p>No layer was started.</p>';
  const figures = report.traces.map((t) => `<figure>${traceChart(t)}<figcaption>Layer ${t.layer}, ${h(t.material)}: ${t.measured.length} points shown</figcaption></figure>`);
  return ['<h2>Traces</h2>', '<p class="sub">Each layer’s monitor signal against the chip thickness, over the prediction; the line marks the target on the chip.</p>', `<div class="traces">${figures.join('\n')}</div>`].join('\n');
}

function traceChart(t: ReportTrace): string {
  const predicted: ChartSeries = { label: 'predicted', x: t.predicted.map((_, i) => i * t.stepNm), y: t.predicted, style: 'dashed', color: '#3f6e9a' };
  const measured: ChartSeries = { label: 'measured', x: t.measured.map((p) => p[0]), y: t.measured.map((p) => p[1]), style: 'solid', color: '#1d2733' };
  return chart([predicted, measured], {
    title: `Layer ${t.layer} ${t.material} at ${fixed(t.wavelengthNm, 0)} nm`,
    xLabel: 'Chip thickness (nm)',
    yLabel: t.signal === 'transmission' ? 'T (%)' : 'R (%)',
    yPercent: true,
    width: 360,
    height: 240,
    markers: [{ x: t.chipTargetNm, label: 'target' }],
    idPrefix: `report-trace-${t.layer}`,
  });
}

function rateSection(report: RunReport): string {
  if (report.rate.length === 0) return '<h2>Crystal rate</h2>\n<p>No crystal readings while depositing.</p>';
  const x = report.rate.map((p) => p[0]);
  return [
    '<h2>Crystal rate</h2>',
    `<figure>${chart(
      [
        { label: 'rate', x, y: report.rate.map((p) => p[1]), style: 'solid' },
        { label: 'band low', x, y: report.rate.map((p) => p[2]), style: 'dotted', color: '#6f7780' },
        { label: 'band high', x, y: report.rate.map((p) => p[3]), style: 'dotted', color: '#6f7780' },
      ],
      { title: 'Deposition rate on the parts from the crystal', xLabel: 'Run time (s)', yLabel: 'Rate (nm/s)', width: 1000, height: 320, idPrefix: 'report-rate' },
    )}</figure>`,
  ].join('\n');
}

function outcomeSection(report: RunReport): string {
  const o = report.outcome;
  if (!o) return '<h2>Outcome spectrum</h2>\n<p>Not available for this run.</p>';
  const q = o.preferred;
  const figure = chart(
    [
      { label: `design ${q}`, x: o.wavelengthsNm, y: o.design[q], style: 'dashed', color: '#3f6e9a' },
      { label: `as deposited (estimated) ${q}`, x: o.wavelengthsNm, y: o.deposited[q], style: 'solid', color: '#1d2733' },
    ],
    { title: `Outcome: ${q} of the stack as deposited against the design`, xLabel: 'Wavelength (nm)', yLabel: `${q} (%)`, yPercent: true, width: 1000, height: 360, idPrefix: 'report-outcome' },
  );
  return [
    '<h2>Outcome spectrum</h2>',
    `<p class="sub">${o.layersEstimated} layer(s) at their estimated thickness, the rest at the design’s; largest |ΔT| ${fixed(100 * o.maxAbsT, 2)} pp, largest |ΔR| ${fixed(100 * o.maxAbsR, 2)} pp over ${o.fromNm}–${o.toNm} nm.</p>`,
    `<figure>${figure}</figure>`,
  ].join('\n');
}

function calibrationSection(calibration: unknown): string {
  const out = ['<h2>Calibration</h2>'];
  const value = calibration !== null && typeof calibration === 'object' && !Array.isArray(calibration) ? (calibration as Record<string, unknown>) : null;
  let shown = false;
  for (const key of ['materials', 'layers']) {
    const table = value ? tableOf(value[key]) : null;
    if (table) {
      out.push(`<h3>${h(key)}</h3>`, table);
      shown = true;
    }
  }
  if (!shown) out.push(`<pre>${h(JSON.stringify(calibration, null, 2))}</pre>`);
  return out.join('\n');
}

/** A list of objects, or an object of objects (keyed by name), as a table; null for anything else. */
function tableOf(value: unknown): string | null {
  const isRecord = (v: unknown): v is Record<string, unknown> => v !== null && typeof v === 'object' && !Array.isArray(v);
  let rows: [string | null, Record<string, unknown>][];
  if (Array.isArray(value) && value.every(isRecord)) rows = value.map((v) => [null, v]);
  else if (isRecord(value) && Object.values(value).every(isRecord)) rows = Object.entries(value).map(([k, v]) => [k, v as Record<string, unknown>]);
  else return null;
  if (rows.length === 0) return null;
  const keyed = rows.some(([k]) => k !== null);
  const columns = [...new Set(rows.flatMap(([, v]) => Object.keys(v)))];
  const head = `${keyed ? '<th>name</th>' : ''}${columns.map((c) => `<th>${h(c)}</th>`).join('')}`;
  const body = rows.map(([k, v]) => `<tr>${keyed ? `<td>${h(k ?? '')}</td>` : ''}${columns.map((c) => cell(v[c])).join('')}</tr>`).join('');
  return `<div class="wide"><table><thead><tr>${head}</tr></thead><tbody>${body}</tbody></table></div>`;
}

function cell(value: unknown): string {
  if (typeof value === 'number') return `<td class="num">${Number.isFinite(value) ? h(String(Number(value.toPrecision(6)))) : '–'}</td>`;
  if (value === undefined || value === null) return '<td>–</td>';
  return `<td>${h(typeof value === 'string' ? value : JSON.stringify(value))}</td>`;
}

/** An inline chart; a chart with nothing to draw says so instead. */
function chart(series: ChartSeries[], options: ChartOptions): string {
  const drawn = series.filter((s) => Array.from(s.y).some(Number.isFinite));
  if (drawn.length === 0) return '<p>No readings to draw.</p>';
  try {
    return renderLineChart(drawn, options).replace(/^<\?xml[^>]*>\s*/, '');
  } catch {
    return '<p>This chart could not be drawn from the readings.</p>';
  }
}

function definitionList(rows: readonly (readonly [string, string])[]): string {
  return `<dl>${rows.map(([k, v]) => `<dt>${h(k)}</dt><dd>${h(v)}</dd>`).join('')}</dl>`;
}

function fixed(value: number | null | undefined, digits: number): string {
  if (value === null || value === undefined || !Number.isFinite(value)) return '–';
  // No "−0.00": a value that rounds to zero is zero.
  const text = value.toFixed(digits);
  return Number(text) === 0 ? (0).toFixed(digits) : text.replace(/^-/, '−');
}

function clock(seconds: number): string {
  const s = Math.max(0, Math.round(seconds));
  return `${Math.floor(s / 3600)}:${String(Math.floor((s % 3600) / 60)).padStart(2, '0')}:${String(s % 60).padStart(2, '0')}`;
}
