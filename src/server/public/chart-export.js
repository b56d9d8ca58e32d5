/* global document, Blob */
// Pictures of the dashboard's charts for download: PNG from the chart's own canvas, SVG drawn
// anew from the chart's data and scales (lines, their dashes, axes with 1-2-5 ticks, the marks).

const W = 800;
const H = 480;
const M = { left: 70, right: 20, top: 40, bottom: 56 };

const escapeXml = (text) => String(text).replace(/[<>&"']/g, (c) => ({ '<': '&lt;', '>': '&gt;', '&': '&amp;', '"': '&quot;', "'": '&apos;' })[c]);

/** About `count` ticks at 1, 2 or 5 × a power of ten between min and max. */
export function niceTicks(min, max, count = 6) {
  if (!(Number.isFinite(min) && Number.isFinite(max)) || max <= min) return [];
  const raw = (max - min) / count;
  const power = 10 ** Math.floor(Math.log10(raw));
  const step = [1, 2, 5, 10].map((m) => m * power).find((s) => s >= raw) ?? 10 * power;
  const ticks = [];
  for (let v = Math.ceil(min / step) * step; v <= max + step * 1e-9; v += step) ticks.push(Number(v.toPrecision(12)));
  return ticks;
}

/** The PNG of a uPlot chart, on white (the canvas itself is transparent), as a Blob. */
export function chartPng(plot) {
  const source = plot.ctx.canvas;
  const canvas = document.createElement('canvas');
  canvas.width = source.width;
  canvas.height = source.height;
  const ctx = canvas.getContext('2d');
  ctx.fillStyle = '#ffffff';
  ctx.fillRect(0, 0, canvas.width, canvas.height);
  ctx.drawImage(source, 0, 0);
  return new Promise((resolve, reject) => canvas.toBlob((blob) => (blob ? resolve(blob) : reject(new Error('no picture'))), 'image/png'));
}

/**
 * An SVG document of a uPlot chart: `about` gives the title, axis labels and the marks
 * ({ title, xLabel, yLabel, vLines: [{x, label}], hLines: [{y, label}] }).
 */
export function chartSvg(plot, about) {
  const xs = plot.scales.x;
  const ys = plot.scales.y;
  const [x0, x1, y0, y1] = [xs.min, xs.max, ys.min, ys.max];
  const pw = W - M.left - M.right;
  const ph = H - M.top - M.bottom;
  const px = (x) => M.left + ((x - x0) / (x1 - x0)) * pw;
  const py = (y) => M.top + ph - ((y - y0) / (y1 - y0)) * ph;
  const f = (v) => v.toFixed(1);
  const out = [
    `<svg xmlns="http://www.w3.org/2000/svg" width="${W}" height="${H}" viewBox="0 0 ${W} ${H}" font-family="system-ui, sans-serif" font-size="14">`,
    `<rect width="${W}" height="${H}" fill="#ffffff"/>`,
    `<text x="${W / 2}" y="24" text-anchor="middle" font-size="16" font-weight="600">${escapeXml(about.title)}</text>`,
  ];
  for (const t of niceTicks(x0, x1)) {
    out.push(`<line x1="${f(px(t))}" y1="${M.top}" x2="${f(px(t))}" y2="${M.top + ph}" stroke="#ecebe6"/>`);
    out.push(`<text x="${f(px(t))}" y="${M.top + ph + 18}" text-anchor="middle">${escapeXml(String(t))}</text>`);
  }
  for (const t of niceTicks(y0, y1)) {
    out.push(`<line x1="${M.left}" y1="${f(py(t))}" x2="${M.left + pw}" y2="${f(py(t))}" stroke="#ecebe6"/>`);
    out.push(`<text x="${M.left - 6}" y="${f(py(t) + 5)}" text-anchor="end">${escapeXml(String(t))}</text>`);
  }
  out.push(`<rect x="${M.left}" y="${M.top}" width="${pw}" height="${ph}" fill="none" stroke="#48525e"/>`);
  out.push(`<text x="${M.left + pw / 2}" y="${H - 12}" text-anchor="middle">${escapeXml(about.xLabel)}</text>`);
  out.push(`<text transform="translate(18 ${M.top + ph / 2}) rotate(-90)" text-anchor="middle">${escapeXml(about.yLabel)}</text>`);
  out.push(`<clipPath id="plot"><rect x="${M.left}" y="${M.top}" width="${pw}" height="${ph}"/></clipPath><g clip-path="url(#plot)">`);
  const legend = [];
  plot.series.forEach((series, i) => {
    if (i === 0 || !series.show) return;
    const x = plot.data[0];
    const y = plot.data[i];
    let d = '';
    let pen = false;
    for (let k = 0; k < x.length; k++) {
      const v = y[k];
      if (v === null || v === undefined || !Number.isFinite(v)) {
        // A gap breaks the line unless the series spans gaps (the model's prediction, the trace).
        if (!series.spanGaps) pen = false;
        continue;
      }
      d += `${pen ? 'L' : 'M'}${f(px(x[k]))} ${f(py(v))}`;
      pen = true;
    }
    const stroke = typeof series.stroke === 'function' ? series.stroke(plot, i) : series.stroke;
    const dash = series.dash ? ` stroke-dasharray="${series.dash.join(' ')}"` : '';
    out.push(`<path d="${d}" fill="none" stroke="${escapeXml(stroke ?? '#1b2026')}" stroke-width="${series.width ?? 1.5}"${dash}/>`);
    legend.push({ label: series.label, stroke, dash });
  });
  for (const v of about.vLines) out.push(`<line x1="${f(px(v.x))}" y1="${M.top}" x2="${f(px(v.x))}" y2="${M.top + ph}" stroke="#48525e" stroke-width="2"/><text x="${f(px(v.x) - 6)}" y="${M.top + 16}" text-anchor="end">${escapeXml(v.label)}</text>`);
  for (const h of about.hLines) out.push(`<line x1="${M.left}" y1="${f(py(h.y))}" x2="${M.left + pw}" y2="${f(py(h.y))}" stroke="#48525e" stroke-dasharray="2 3"/><text x="${M.left + 8}" y="${f(py(h.y) + 16)}">${escapeXml(h.label)}</text>`);
  out.push('</g>');
  legend.forEach((l, i) => {
    const y = M.top + 16 + i * 18;
    out.push(`<line x1="${M.left + pw - 150}" y1="${y - 5}" x2="${M.left + pw - 122}" y2="${y - 5}" stroke="${escapeXml(l.stroke ?? '#1b2026')}" stroke-width="2"${l.dash}/><text x="${M.left + pw - 116}" y="${y}">${escapeXml(l.label)}</text>`);
  });
  out.push('</svg>');
  return `${out.join('\n')}\n`;
}

/** Rows as CSV (RFC 4180 quoting where needed). */
export function csv(header, rows) {
  const cell = (v) => {
    const text = v === null || v === undefined ? '' : String(v);
    return /[",\n]/.test(text) ? `"${text.replace(/"/g, '""')}"` : text;
  };
  return `${[header, ...rows].map((r) => r.map(cell).join(',')).join('\r\n')}\r\n`;
}

/** Hands the browser a file to save. */
export function download(name, href) {
  const a = document.createElement('a');
  a.href = href;
  a.download = name;
  document.body.append(a);
  a.click();
  a.remove();
}

export function blobUrl(content, type) {
  return URL.createObjectURL(content instanceof Blob ? content : new Blob([content], { type }));
}
