/* global document, window, location, WebSocket, fetch, sessionStorage, Notification, AudioContext, requestAnimationFrame, setTimeout, clearTimeout, URLSearchParams, Event */
// The dashboard: one WebSocket feed (the run, or a replay) into the same views; commands over
// HTTP with the bearer token the operator entered (kept in this tab's sessionStorage only).
import { blobUrl, chartPng, chartSvg, csv, download } from './chart-export.js';
import { createCrystalChart, createOutcomeChart, createTraceChart, setLargeType } from './charts.js';
import * as fmt from './format.js';

const $ = (id) => document.getElementById(id);
const params = new URLSearchParams(location.search);
const viewerToken = params.get('viewer');
const TOKEN_KEY = 'fringe.commandToken';
const MAX_LOG = 300;
const MAX_RATE_POINTS = 4000;
const MAX_TRACE_POINTS = 20000;
/** An estimated error beyond this is flagged in the stack table (common practice, no source). */
const FLAG_ERROR_PERCENT = 2;

/**
 * At most `max` points at an even density over the whole span (as the server keeps them): when
 * full, every other point goes and from then on only every second new one is kept; the newest
 * point always stays as the tail.
 */
class History {
  constructor(max) {
    this.max = max;
    this.reset([]);
  }
  reset(points) {
    this.points = points.slice();
    this.tail = undefined;
    this.stride = 1;
    this.seen = 0;
  }
  push(point) {
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
  values() {
    return this.tail === undefined ? this.points : [...this.points, this.tail];
  }
  get length() {
    return this.points.length + (this.tail === undefined ? 0 : 1);
  }
  get last() {
    return this.tail ?? this.points[this.points.length - 1];
  }
}

// ---- state --------------------------------------------------------------------------------
const model = {
  feed: 'live',
  replay: null, // { id, speed }
  connected: false,
  snapshot: null,
  status: null,
  rows: [],
  trace: null,
  tracePoints: new History(MAX_TRACE_POINTS),
  ratePoints: new History(MAX_RATE_POINTS),
  crystal: { partNm: null, frequencyHz: null, lifeUsed: null },
  log: new Map(), // seq -> event
  alerts: new Map(), // id -> { ...alert, open }
  outcome: null,
  commandsAccepted: false,
  token: sessionStorage.getItem(TOKEN_KEY),
  tokenState: 'none', // none | checking | ok | refused
  quantity: null,
  /** Stack rows whose detail is open. */
  openRows: new Set(),
  sound: false,
  notify: false,
};

const charts = {
  trace: createTraceChart($('trace-chart')),
  crystal: createCrystalChart($('crystal-chart')),
  outcome: createOutcomeChart($('outcome-chart')),
};

// ---- rendering, batched to animation frames ------------------------------------------------
const dirty = new Set();
let frameQueued = false;
let lastChartDraw = 0;
function schedule(...parts) {
  for (const p of parts) dirty.add(p);
  if (!frameQueued) {
    frameQueued = true;
    requestAnimationFrame(render);
  }
}
function render(now) {
  frameQueued = false;
  // Charts at most ten times a second; text at once.
  const chartsDue = now - lastChartDraw >= 100;
  if (dirty.has('status')) renderStatus();
  if (dirty.has('rows')) renderRows();
  if (dirty.has('log')) renderLog();
  if (dirty.has('controls')) renderControls();
  if (dirty.has('crystal')) renderCrystalFigures();
  if (chartsDue) {
    if (dirty.has('trace')) renderTrace();
    if (dirty.has('rate')) renderCrystalChart();
    if (dirty.has('outcome')) renderOutcome();
    lastChartDraw = now;
    for (const p of ['trace', 'rate', 'outcome']) dirty.delete(p);
  }
  for (const p of ['status', 'rows', 'log', 'controls', 'crystal']) dirty.delete(p);
  if (dirty.size > 0) schedule();
}

function setText(id, text) {
  const el = $(id);
  if (el.textContent !== text) el.textContent = text;
}

function renderStatus() {
  const s = model.status;
  const phase = !model.connected ? (model.snapshot ? 'offline' : 'connecting') : (s?.phase ?? 'connecting');
  $('st-state').dataset.phase = phase;
  setText('st-word', fmt.PHASE_WORDS[phase] ?? phase);
  document.body.dataset.stale = String(!model.connected && model.snapshot !== null);
  $('stale-banner').hidden = model.connected || model.snapshot === null;
  if (!s) return;
  setText('st-layer', s.layer === null ? `– of ${s.layers}` : `${s.layer} of ${s.layers}`);
  setText('st-material', s.material ?? '–');
  // The rule that cuts this layer now (the model fit while it runs), its planned mode in the title.
  setText('st-cut', s.cutBy ? fmt.reasonWords(s.cutBy) : '–');
  $('st-cut').title = s.cut ? `planned: ${fmt.modeWords(s.cut)}; optical layers decided by the ${fmt.estimatorWords(model.snapshot?.estimator ?? 'plain')}` : '';
  let ttc = '–';
  if (s.phase === 'depositing' && s.timeToCutS !== null) ttc = fmt.clock(s.timeToCutS);
  else if (s.phase === 'closing') ttc = 'now';
  else if (s.phase === 'holding' || s.phase === 'awaiting-close') ttc = 'held';
  setText('st-ttc', ttc);
  const soon = s.phase === 'closing' || (s.phase === 'depositing' && (s.approaching || (s.timeToCutS !== null && s.timeToCutS <= 10)));
  $('st-ttc-item').dataset.soon = String(soon);
  $('readout').dataset.soon = String(soon);
  const alertBox = $('st-alert');
  const worst = s.worstAlert;
  alertBox.dataset.severity = worst ? worst.severity : 'none';
  const more = s.openAlerts > 1 ? ` (+${s.openAlerts - 1} more open)` : '';
  setText('st-alert-text', worst ? `${fmt.SEVERITY_WORDS[worst.severity]}: ${worst.message}${more}` : 'No open alerts');
  setText('run-clock', fmt.clock(s.nowS));
  // The readout beside the trace.
  setText('ro-thickness', s.thicknessNm === null ? '–' : s.thicknessNm.toFixed(2));
  setText('ro-pm', s.plusMinusNm === null ? '± –' : `± ${fmt.nm(s.plusMinusNm)}`);
  setText('ro-src', s.estimateSource ? `by the ${fmt.SOURCE_WORDS[s.estimateSource]}` : '');
  $('ro-pm').title = fmt.SOURCE_TITLES[s.estimateSource] ?? fmt.SOURCE_TITLES.crystal;
  $('ro-src').title = $('ro-pm').title;
  setText('ro-target', s.targetNm === null ? '–' : fmt.nm(s.targetNm));
  setText('ro-elapsed', s.layerElapsedS === null ? '–' : fmt.clock(s.layerElapsedS));
  setText('stack-sub', s.layer === null ? `${s.layers} layers` : `layer ${s.layer} of ${s.layers}`);
  schedule('controls');
}

function renderTrace() {
  const t = model.trace;
  const el = $('trace-chart');
  el.dataset.points = String(model.tracePoints.length);
  el.dataset.layer = t ? String(t.layer) : '';
  if (!t) {
    setText('trace-sub', 'waiting for the first layer');
    charts.trace.set(null, []);
    return;
  }
  const signal = t.signal === 'reflection' ? 'reflectance' : 'transmittance';
  const cutBy = model.status?.layer === t.layer && model.status.cutBy ? fmt.reasonWords(model.status.cutBy) : fmt.plannedCutWords(t.cut, model.snapshot?.estimator);
  setText('trace-sub', `layer ${t.layer} · ${t.material} · ${signal} at ${t.wavelengthNm} nm · ${t.chip} · cut on ${cutBy}`);
  const last = model.tracePoints.last;
  setText('ro-signal', last ? fmt.percent(last[1]) : '–');
  const cutIndex = Math.round(t.chipTargetNm / t.stepNm);
  setText('ro-cutsignal', t.predicted.length > cutIndex ? fmt.percent(t.predicted[cutIndex]) : '–');
  setText('ro-trigger', t.triggerSignal === null ? 'not used' : fmt.percent(t.triggerSignal));
  // The cuts sent in this layer, marked where the command went out.
  const cuts = cutsSoFar()
    .filter((c) => c.layer === t.layer)
    .map((c) => ({ timeS: c.timeS, label: `cut · ${fmt.reasonWords(c.reason)}` }));
  el.dataset.cuts = String(cuts.length);
  charts.trace.set(t.predicted.length > 0 ? t : null, model.tracePoints.values(), cuts);
}

function renderOutcome() {
  const o = model.outcome;
  if (!o) {
    setText('outcome-sub', 'no spectrum for this design');
    charts.outcome.set(null, model.quantity ?? 'T');
    return;
  }
  const q = model.quantity ?? o.preferred;
  for (const b of document.querySelectorAll('[data-q]')) b.setAttribute('aria-pressed', String(b.dataset.q === q));
  const max = q === 'T' ? o.maxAbsT : o.maxAbsR;
  const n = o.layersEstimated;
  setText('outcome-sub', `${o.fromNm}–${o.toNm} nm`);
  // Say what the curve is: the finished layers as the fits know them (optical thickness and index), the rest as designed.
  setText('outcome-deposited', n === 0 ? 'as deposited (none yet: the design)' : `as deposited: 1–${n} from the fits’ n·d and index${n < model.rows.length ? ', the rest as designed' : ''}`);
  setText('outcome-figure', `largest |Δ${q}| ${(max * 100).toFixed(2)} pp`);
  charts.outcome.set(o, q);
}

/** The cuts in the log, oldest first: [{ timeS, layer, reason }]. */
function cutsSoFar() {
  const out = [];
  for (const e of model.log.values()) if (e.type === 'cut') out.push({ timeS: e.timeS, layer: e.layer, reason: e.reason });
  return out.sort((a, b) => a.timeS - b.timeS);
}

function renderCrystalChart() {
  const cuts = cutsSoFar();
  $('crystal-chart').dataset.cuts = String(cuts.length);
  charts.crystal.set(model.ratePoints.values(), cuts);
}

function renderCrystalFigures() {
  const c = model.crystal;
  const snap = model.snapshot?.crystal;
  const last = model.ratePoints.last;
  const rateEl = $('cr-rate');
  const depositing = model.status?.phase === 'depositing';
  rateEl.textContent = last && depositing ? fmt.rate(last[1]) : '–';
  rateEl.dataset.out = String(Boolean(depositing && last && (last[1] < last[2] || last[1] > last[3])));
  const plannedRate = snap?.plannedRateNmPerS;
  setText('cr-plan', plannedRate ? `(plan ${plannedRate.toFixed(3)} ± ${snap.rateBandPercent} %)` : '');
  setText('cr-thickness', c.partNm === null ? '–' : fmt.nm(c.partNm));
  setText('cr-frequency', fmt.frequency(c.frequencyHz));
  const life = c.lifeUsed;
  setText('cr-life', life === null ? '–' : `${(life * 100).toFixed(1)} %`);
  $('cr-life-fill').style.width = `${Math.min(100, Math.max(0, (life ?? 0) * 100))}%`;
  const bar = $('cr-life-bar');
  bar.setAttribute('aria-valuenow', String(Math.round((life ?? 0) * 100)));
  bar.dataset.low = String(life !== null && life > 0.85);
}

function renderRows() {
  const body = $('stack-body');
  const rows = model.rows;
  const html = [];
  for (const r of rows) html.push(rowHtml(r));
  body.innerHTML = html.join('');
  const current = body.querySelector('tr[data-status="current"]');
  if (current && current.dataset.layer !== body.dataset.scrolledTo) {
    // Scroll the table, never the page, so the current row sits a third of the way down.
    body.dataset.scrolledTo = current.dataset.layer;
    const wrap = $('stack-wrap');
    wrap.scrollTop = Math.max(0, current.offsetTop - wrap.clientHeight / 3);
  }
}

function escapeHtml(s) {
  return String(s).replace(/[&<>"']/g, (c) => ({ '&': '&amp;', '<': '&lt;', '>': '&gt;', '"': '&quot;', "'": '&#39;' })[c]);
}

/** The cut column: the mode for layers to come, what actually cut it once cut. */
function cutCell(r) {
  if (r.skipped) return 'skipped';
  if (r.cutReason) return `✓ ${fmt.reasonWords(r.cutReason, true)}`;
  return fmt.reasonWords(r.cutRule ?? r.cut, true);
}

function rowHtml(r) {
  const big = r.errorPercent !== null && Math.abs(r.errorPercent) > FLAG_ERROR_PERCENT;
  const label = r.status === 'current' ? 'now depositing' : r.status === 'past' ? 'done' : 'to come';
  const open = model.openRows.has(r.number);
  // A finished layer's figure moves when the chip refit revises it: the current one is shown, marked.
  const revised = r.revised ? `<span class="revised" title="revised by the chip refit: first ${fmt.nm(r.firstEstimatedNm)}">↻</span>` : '';
  const row =
    `<tr data-status="${r.status}" data-layer="${r.number}" data-skipped="${r.skipped}" data-revised="${r.revised === true}" aria-expanded="${open}" tabindex="0" title="layer ${r.number}: ${label}; click for details">` +
    `<td class="n">${r.number}</td><td class="material">${escapeHtml(r.material)}</td><td class="num">${r.targetNm.toFixed(2)}</td>` +
    `<td class="cut-cell">${escapeHtml(cutCell(r))}</td>` +
    `<td class="num achieved">${r.estimatedNm === null ? '' : r.estimatedNm.toFixed(2)}${revised}</td>` +
    `<td class="num${big ? ' big-error' : ''}" title="${r.errorNm === null ? '' : fmt.signed(r.errorNm, 2, ' nm')}">${r.errorPercent === null ? '' : fmt.signed(r.errorPercent, 2, '')}</td></tr>`;
  return open ? row + `<tr class="detail" data-detail="${r.number}"><td colspan="6">${escapeHtml(rowDetail(r))}</td></tr>` : row;
}

/** A row's detail: how it is cut, its figures (the first one too when a refit revised it), its chip. */
function rowDetail(r) {
  const parts = [`${r.material}, target ${fmt.nm(r.targetNm)} at the design index`];
  if (r.skipped) parts.push('skipped');
  else if (r.cutReason) parts.push(`cut on ${fmt.reasonWords(r.cutReason)}`);
  else parts.push(`${r.status === 'current' ? 'cutting' : 'to be cut'} on ${fmt.reasonWords(r.cutRule ?? r.cut)} (plan: ${fmt.modeWords(r.cut)})`);
  if (r.estimatedNm !== null) parts.push(`now ${fmt.nm(r.estimatedNm)} (physical)`);
  if (r.firstEstimatedNm !== null && r.firstEstimatedNm !== undefined) parts.push(`${r.revised ? 'first figure' : 'figure at its end'} ${fmt.nm(r.firstEstimatedNm)}${r.revised ? ', revised by the chip refit' : ''}`);
  if (typeof r.indexFactor === 'number') parts.push(`index ${r.indexFactor.toFixed(3)} × the design's`);
  parts.push(`${r.chip} at ${r.wavelengthNm} nm`);
  return parts.join(' · ');
}

function renderLog() {
  const list = $('log-list');
  const entries = [...model.log.entries()].sort((a, b) => b[0] - a[0]).slice(0, MAX_LOG);
  const parts = [];
  for (const [seq, e] of entries) {
    const d = fmt.describeEvent(e, model.snapshot?.estimator);
    const alert = e.type === 'alert' ? model.alerts.get(e.id) : null;
    const open = alert?.open === true;
    const ack = open ? `<button type="button" class="ack" data-alert="${escapeHtml(e.id)}"${canCommand() ? '' : ' disabled title="needs the command token"'}>Acknowledge ${escapeHtml(e.id)}</button>` : '';
    parts.push(
      `<li data-seq="${seq}" data-kind="${e.type}" data-severity="${d.severity ?? ''}" data-acknowledged="${alert ? String(!open) : ''}">` +
        `<time>${fmt.clock(e.timeS)}</time><span class="mark" aria-hidden="true">${d.mark}</span><span>${escapeHtml(d.text)}${alert && !open ? ' (acknowledged)' : ''}</span>${ack}</li>`,
    );
  }
  list.innerHTML = parts.join('');
}

// ---- controls -----------------------------------------------------------------------------
const ACTION_LABELS = { start: 'Start run', hold: 'Hold', resume: 'Resume', 'cut-now': 'Cut now', 'skip-layer': 'Skip layer', abort: 'Abort run', acknowledge: 'Acknowledge' };

function lockReason() {
  if (model.feed === 'replay') return 'This is a replay: the controls act on the live run only.';
  if (!model.token || model.tokenState === 'refused') return 'Enter the command token printed when fringe started.';
  if (model.tokenState === 'checking') return 'Checking the token…';
  if (!model.connected) return 'Not connected to the run: the controls wait for the connection.';
  if (!model.commandsAccepted) return 'This run does not take commands.';
  return null;
}
const canCommand = () => lockReason() === null;

function applicable(action, s) {
  if (!s) return false;
  switch (action) {
    case 'start':
      return s.phase === 'ready';
    case 'hold':
      return s.phase === 'depositing';
    case 'resume':
      // Awaiting a close: resuming says the operator has checked the shutter by hand.
      return s.phase === 'holding' || s.phase === 'awaiting-close';
    case 'cut-now':
    case 'skip-layer':
      return s.phase === 'depositing' || s.phase === 'holding';
    case 'abort':
      return s.phase !== 'finished' && s.phase !== 'aborted';
    default:
      return true;
  }
}

function renderControls() {
  const reason = lockReason();
  $('lock-reason').dataset.locked = String(reason !== null);
  setText('lock-word', reason === null ? 'Unlocked.' : 'Locked.');
  setText('lock-text', reason ?? 'Each command asks for confirmation first.');
  const s = model.status;
  for (const b of document.querySelectorAll('button.cmd')) {
    const action = b.dataset.action;
    if (action === 'start') b.hidden = s?.phase !== 'ready';
    const usable = applicable(action, s);
    b.disabled = reason !== null || !usable;
    b.title = reason ?? (usable ? '' : `${ACTION_LABELS[action]} is not possible while the run is ${(fmt.PHASE_WORDS[s?.phase] ?? '').toLowerCase()}`);
  }
  for (const b of document.querySelectorAll('button.ack')) {
    b.disabled = reason !== null;
    b.title = reason ?? '';
  }
  $('token-forget').disabled = !model.token;
}

function confirmText(action, alertId) {
  const s = model.status ?? {};
  const layer = s.layer ?? '–';
  const material = s.material ?? 'the';
  const thickness = s.thicknessNm === null || s.thicknessNm === undefined ? 'its present thickness' : fmt.nm(s.thicknessNm);
  const target = s.targetNm == null ? '' : ` of ${fmt.nm(s.targetNm)}`;
  switch (action) {
    case 'start':
      return ['Start the run?', 'The first layer’s shutter opens and fringe starts cutting layers.', false];
    case 'hold':
      return [`Hold layer ${layer}?`, `The ${material} shutter closes now; the layer waits at about ${thickness}${target} until you resume.`, false];
    case 'resume':
      if (s.phase === 'awaiting-close') {
        return [
          'Go on without the shutter’s confirmation?',
          'A shutter’s close has not been confirmed. Go on only once you have checked by hand that it is shut: the next layer then opens.',
          true,
        ];
      }
      return [`Resume layer ${layer}?`, `The ${material} shutter opens again and the layer grows on to its target.`, false];
    case 'cut-now':
      return [`Cut layer ${layer} now?`, `The ${material} shutter closes at once, at about ${thickness}${target}. The next layer follows.`, true];
    case 'skip-layer':
      return [`Skip layer ${layer}?`, `The ${material} shutter closes and the run goes on with the next layer; this one keeps what has grown (${thickness}).`, true];
    case 'abort':
      return ['Abort the run?', 'Every shutter is asked to close and the run ends. It cannot be resumed.', true];
    case 'acknowledge': {
      const a = model.alerts.get(alertId);
      return [`Acknowledge alert ${alertId}?`, a ? `“${a.message}” It leaves the status line; the log keeps it.` : 'It leaves the status line; the log keeps it.', false];
    }
    default:
      return ['Confirm', '', false];
  }
}

function confirmDialog(title, text, okLabel, danger) {
  const dialog = $('confirm');
  $('confirm-title').textContent = title;
  $('confirm-text').textContent = text;
  const ok = $('confirm-ok');
  ok.textContent = okLabel;
  ok.dataset.danger = String(danger);
  dialog.returnValue = '';
  return new Promise((resolve) => {
    dialog.addEventListener('close', () => resolve(dialog.returnValue === 'ok'), { once: true });
    dialog.showModal();
    $('confirm-cancel').focus();
  });
}

async function sendCommand(action, alertId) {
  const [title, text, danger] = confirmText(action, alertId);
  const yes = await confirmDialog(title, text, ACTION_LABELS[action], danger);
  if (!yes) return;
  const result = $('cmd-result');
  try {
    const response = await fetch(`/api/commands/${action}`, {
      method: 'POST',
      headers: { 'content-type': 'application/json', authorization: `Bearer ${model.token}` },
      body: JSON.stringify(alertId ? { alertId } : {}),
    });
    const body = await response.json().catch(() => ({}));
    if (response.status === 200) {
      result.dataset.ok = 'true';
      result.textContent = `${ACTION_LABELS[action]}: done at ${fmt.clock(body.timeS)} run time.`;
    } else if (response.status === 401) {
      model.tokenState = 'refused';
      forgetToken();
      result.dataset.ok = 'false';
      result.textContent = 'The command token was refused: enter it again.';
    } else {
      result.dataset.ok = 'false';
      result.textContent = body.message ?? `${ACTION_LABELS[action]} failed (${response.status}).`;
    }
  } catch {
    result.dataset.ok = 'false';
    result.textContent = `${ACTION_LABELS[action]}: the server could not be reached.`;
  }
  schedule('controls', 'log');
}

async function checkToken(token) {
  model.tokenState = 'checking';
  schedule('controls');
  try {
    const response = await fetch('/api/commands', { headers: { authorization: `Bearer ${token}` } });
    if (response.status === 200) {
      model.token = token;
      model.tokenState = 'ok';
      sessionStorage.setItem(TOKEN_KEY, token);
      $('cmd-result').textContent = '';
    } else if (response.status === 429) {
      // Too many tries from here: the token was not even looked at, so it is neither right nor wrong yet.
      const body = await response.json().catch(() => ({}));
      model.tokenState = 'none';
      $('cmd-result').dataset.ok = 'false';
      $('cmd-result').textContent = `Not checked: ${body.message ?? 'too many tries; wait a little'}.`;
    } else {
      model.tokenState = 'refused';
      forgetToken();
      $('cmd-result').dataset.ok = 'false';
      $('cmd-result').textContent = 'That token was refused.';
    }
  } catch {
    model.tokenState = 'none';
  }
  schedule('controls', 'log');
}

function forgetToken() {
  model.token = null;
  sessionStorage.removeItem(TOKEN_KEY);
  $('token-input').value = '';
  if (model.tokenState !== 'refused') model.tokenState = 'none';
}

// ---- tone and notifications (opt-in) --------------------------------------------------------
let audio = null;
function tone(kind) {
  if (!model.sound || !audio) return;
  const pattern = kind === 'critical' ? [880, 0, 880, 0, 880] : kind === 'warning' ? [620, 0, 620] : [520, 780];
  let t = audio.currentTime + 0.02;
  for (const f of pattern) {
    if (f > 0) {
      const osc = audio.createOscillator();
      const gain = audio.createGain();
      osc.frequency.value = f;
      gain.gain.setValueAtTime(0.0001, t);
      gain.gain.exponentialRampToValueAtTime(0.25, t + 0.01);
      gain.gain.exponentialRampToValueAtTime(0.0001, t + 0.14);
      osc.connect(gain).connect(audio.destination);
      osc.start(t);
      osc.stop(t + 0.15);
    }
    t += 0.16;
  }
}
function notify(title, body) {
  if (!model.notify || typeof Notification === 'undefined' || Notification.permission !== 'granted') return;
  try {
    new Notification(title, { body, tag: 'fringe' });
  } catch {
    // Some browsers allow notifications only from a service worker; the tone and the page remain.
  }
}

// ---- the feed -----------------------------------------------------------------------------
function applySnapshot(snap) {
  model.snapshot = snap;
  model.status = snap.status;
  model.rows = snap.layers;
  model.commandsAccepted = snap.commandsAccepted;
  model.trace = snap.trace;
  // The server's histories are authoritative: live points after this snapshot follow it.
  model.tracePoints.reset(snap.trace ? snap.trace.points : []);
  model.ratePoints.reset(snap.crystal.points);
  model.crystal = { partNm: snap.crystal.partNm, frequencyHz: snap.crystal.frequencyHz, lifeUsed: snap.crystal.lifeUsed };
  model.outcome = snap.outcome;
  for (const entry of snap.log) model.log.set(entry.seq, entry.event);
  for (const entry of snap.log) {
    const e = entry.event;
    if (e.type === 'alert' && !model.alerts.has(e.id)) model.alerts.set(e.id, { ...e, open: false });
  }
  const openIds = new Set(snap.alerts.map((a) => a.id));
  for (const a of snap.alerts) model.alerts.set(a.id, { ...a, open: true });
  for (const [id, a] of model.alerts) if (!openIds.has(id)) a.open = false;
  trimLog();
  const source = snap.source === 'replay' ? `replay of ${snap.runId} at ${snap.speed}×` : snap.source === 'simulated' ? `simulated${snap.speed ? ` at ${snap.speed}× real time` : ''}` : 'live';
  setText('run-info', `${snap.recipe} · ${source}`);
  schedule('status', 'rows', 'log', 'controls', 'crystal', 'trace', 'rate', 'outcome');
}

function trimLog() {
  if (model.log.size <= MAX_LOG) return;
  const keys = [...model.log.keys()].sort((a, b) => a - b);
  for (const k of keys.slice(0, keys.length - MAX_LOG)) model.log.delete(k);
}

function onEvent(seq, e) {
  model.log.set(seq, e);
  trimLog();
  const live = model.feed === 'live';
  switch (e.type) {
    case 'layer-started': {
      // The full layer view follows in a snapshot; until then the trace starts empty.
      model.trace = model.trace && model.trace.layer === e.layer ? model.trace : { layer: e.layer, material: e.material, cut: e.cut, predicted: [], turningPoints: [], triggerSignal: null, stepNm: 1, chipTargetNm: e.targetNm, chipRateNmPerS: 1, openedAtS: e.timeS, wavelengthNm: '–', signal: 'transmission', chip: '' };
      model.tracePoints.reset([]);
      model.rows = model.rows.map((r) => ({ ...r, status: r.number < e.layer ? 'past' : r.number === e.layer ? 'current' : 'future' }));
      schedule('trace', 'rows');
      break;
    }
    case 'cut': {
      model.rows = model.rows.map((r) =>
        r.number === e.layer
          ? { ...r, cutReason: e.reason, estimatedNm: e.estimatedNm, errorNm: e.estimatedNm - r.targetNm, errorPercent: (100 * (e.estimatedNm - r.targetNm)) / r.targetNm }
          : r,
      );
      schedule('rows', 'trace', 'rate');
      if (live) {
        tone('cut');
        notify(`Layer ${e.layer} cut`, `${fmt.reasonWords(e.reason)}, ≈ ${fmt.nm(e.estimatedNm)}`);
      }
      break;
    }
    case 'alert':
      model.alerts.set(e.id, { ...e, open: true });
      if (live && e.severity !== 'info') {
        tone(e.severity);
        notify(`${fmt.SEVERITY_WORDS[e.severity]}: layer ${e.layer ?? '–'}`, e.message);
      }
      break;
    case 'alert-acknowledged': {
      const a = model.alerts.get(e.id);
      if (a) a.open = false;
      break;
    }
    default:
      break;
  }
  schedule('log', 'controls');
}

function onOptical(msg) {
  if (!model.trace || msg.layer !== model.trace.layer) return;
  for (const p of msg.points) model.tracePoints.push(p);
  schedule('trace');
}

function onCrystal(msg) {
  for (const p of msg.points) model.ratePoints.push(p);
  model.crystal = { partNm: msg.partNm, frequencyHz: msg.frequencyHz, lifeUsed: msg.lifeUsed };
  schedule('rate', 'crystal');
}

let socket = null;
let retryMs = 500;
let retryTimer = null;

function feedUrl() {
  const proto = location.protocol === 'https:' ? 'wss:' : 'ws:';
  const path = model.feed === 'replay' ? `/api/runs/${encodeURIComponent(model.replay.id)}/replay` : '/api/live';
  const q = new URLSearchParams();
  if (model.feed === 'replay') q.set('speed', String(model.replay.speed));
  if (viewerToken) q.set('viewer', viewerToken);
  const query = q.toString();
  return `${proto}//${location.host}${path}${query ? `?${query}` : ''}`;
}

function setLink(state, text) {
  $('link-state').dataset.state = state;
  setText('link-text', text);
}

function connect() {
  clearTimeout(retryTimer);
  const ws = new WebSocket(feedUrl());
  socket = ws;
  setLink('connecting', 'connecting');
  ws.addEventListener('open', () => {
    if (socket !== ws) return;
    retryMs = 500;
    model.connected = true;
    setLink('open', model.feed === 'replay' ? 'replay feed' : 'live feed');
    schedule('status', 'controls');
  });
  ws.addEventListener('message', (m) => {
    if (socket !== ws) return;
    const msg = JSON.parse(m.data);
    switch (msg.type) {
      case 'snapshot':
        applySnapshot(msg.snapshot);
        break;
      case 'event':
        onEvent(msg.seq, msg.event);
        break;
      case 'optical':
        onOptical(msg);
        break;
      case 'crystal':
        onCrystal(msg);
        break;
      case 'status':
        model.status = msg.status;
        schedule('status');
        break;
      default:
        break;
    }
  });
  ws.addEventListener('close', () => {
    if (socket !== ws) return;
    model.connected = false;
    setLink('closed', `not connected · retrying in ${Math.round(retryMs / 1000)} s`);
    schedule('status', 'controls');
    retryTimer = setTimeout(connect, retryMs);
    retryMs = Math.min(10000, retryMs * 2);
  });
}

function switchFeed(feed, replay = null) {
  model.feed = feed;
  model.replay = replay;
  model.snapshot = null;
  model.status = null;
  model.log = new Map();
  model.alerts = new Map();
  model.trace = null;
  model.tracePoints.reset([]);
  model.ratePoints.reset([]);
  model.connected = false;
  const old = socket;
  socket = null;
  old?.close();
  $('replay-banner').hidden = feed !== 'replay';
  if (replay) setText('replay-text', `Replay of run ${replay.id} at ${replay.speed}× real time, through the controller with the recipe as run.`);
  connect();
  schedule('status', 'rows', 'log', 'controls', 'trace', 'rate', 'outcome', 'crystal');
}

// ---- history ------------------------------------------------------------------------------
function apiHeaders() {
  return viewerToken ? { 'x-fringe-viewer': viewerToken } : {};
}
const withViewer = (url) => (viewerToken ? `${url}?viewer=${encodeURIComponent(viewerToken)}` : url);

async function loadHistory() {
  const body = $('runs-body');
  setText('history-sub', 'loading…');
  try {
    const response = await fetch('/api/runs', { headers: apiHeaders() });
    const { runs } = await response.json();
    setText('history-sub', runs.length === 0 ? 'no runs recorded yet' : `${runs.length} run${runs.length === 1 ? '' : 's'}`);
    body.innerHTML = runs
      .map((r) => {
        const started = r.startedAt ? new Date(r.startedAt).toLocaleString() : r.id;
        const replay = r.replayable ? `<button type="button" data-replay="${escapeHtml(r.id)}">Replay</button>` : '<span title="no recipe.json beside the journal">no replay</span>';
        return (
          `<tr><td data-label="Started">${escapeHtml(started)}</td><td data-label="Recipe">${escapeHtml(r.recipe ?? '–')}</td><td data-label="Source">${escapeHtml(r.source ?? '–')}</td><td data-label="Outcome">${escapeHtml(r.outcome)}${r.calibration ? `<div class="calibration" title="from fringe calibrate (calibration.json beside the run)">calibrated: ${escapeHtml(r.calibration)}</div>` : ''}</td>` +
          `<td class="num" data-label="Layers">${r.layers === null ? '–' : `${r.layers} of ${r.layersPlanned}`}</td><td class="num" data-label="Run time">${fmt.clock(r.durationS)}</td>` +
          `<td class="num" data-label="rms error" title="over the ${r.layersCutByRule ?? 0} layers a rule cut">${r.rmsErrorPercent === null ? '–' : `${r.rmsErrorPercent.toFixed(2)} %`}${r.rmsTrueErrorPercent === null ? '' : ` <span class="true-error">/ ${r.rmsTrueErrorPercent.toFixed(2)} %</span>`}${r.layersCutByRule === null ? '' : ` <span class="true-error">(${r.layersCutByRule})</span>`}</td>` +
          `<td data-label="Actions"><span class="actions"><button type="button" data-summary="${escapeHtml(r.id)}">Summary</button>${replay}` +
          (r.replayable ? `<a href="${escapeHtml(withViewer(`/api/runs/${encodeURIComponent(r.id)}/report`))}" target="_blank" rel="noopener">Report</a>` : '') +
          `<a href="${escapeHtml(withViewer(`/api/runs/${encodeURIComponent(r.id)}/journal`))}" download>Journal (${fmt.bytes(r.journalBytes)})</a></span></td></tr>`
        );
      })
      .join('');
  } catch {
    setText('history-sub', 'the list of runs could not be loaded');
  }
}

async function showSummary(id) {
  const response = await fetch(`/api/runs/${encodeURIComponent(id)}`, { headers: apiHeaders() });
  const detail = await response.json();
  const panel = $('summary-panel');
  panel.hidden = false;
  const s = detail.summary;
  setText('summary-sub', s ? `${id} · ${s.recipe ?? ''} · ${s.outcome ?? ''} · ${fmt.clock(s.durationS)} run time` : `${id} · no summary yet (the run has not ended)`);
  const layers = Array.isArray(s?.layers) ? s.layers : [];
  $('summary-body').innerHTML = layers
    .map((l) => {
      const est = typeof l.estimatedNm === 'number' ? l.estimatedNm.toFixed(2) : '';
      const err = typeof l.errorPercent === 'number' ? fmt.signed(l.errorPercent, 2, '') : '';
      const truth = typeof l.trueNm === 'number' ? l.trueNm.toFixed(2) : '';
      const trueErr = typeof l.trueErrorPercent === 'number' ? fmt.signed(l.trueErrorPercent, 2, '') : '';
      const reason = l.skipped ? 'skipped' : l.cutReason ? fmt.reasonWords(l.cutReason) : '–';
      return (
        `<tr><td data-label="#">${l.number}</td><td data-label="Material">${escapeHtml(l.material ?? '')}</td><td class="num" data-label="Target nm">${Number(l.targetNm).toFixed(2)}</td><td data-label="Cut">${escapeHtml(reason)}</td>` +
        `<td class="num" data-label="Estimated nm">${est}</td><td class="num" data-label="Error %">${err}</td><td class="num" data-label="True nm">${truth}</td><td class="num" data-label="True error %">${trueErr}</td></tr>`
      );
    })
    .join('');
  panel.scrollIntoView({ block: 'nearest' });
}

function showView(which) {
  $('live-view').hidden = which !== 'live';
  $('history-view').hidden = which !== 'history';
  $('nav-live').setAttribute('aria-pressed', String(which === 'live'));
  $('nav-history').setAttribute('aria-pressed', String(which === 'history'));
  if (which === 'history') void loadHistory();
  else window.dispatchEvent(new Event('resize'));
}

// ---- downloads: the readings as CSV, the charts as PNG or SVG ------------------------------
function fileStem(what) {
  const run = (model.snapshot?.runId ?? 'run').replace(/[^A-Za-z0-9._-]/g, '_');
  const layer = what === 'trace' && model.trace ? `-layer${model.trace.layer}` : '';
  return `fringe-${run}-${what}${layer}`;
}

function readingsCsv(what) {
  if (what === 'trace') {
    const opened = model.trace?.openedAtS ?? 0;
    return csv(
      ['run time s', 'time in layer s', 'signal %', 'chip thickness nm'],
      model.tracePoints.values().map((p) => [p[0].toFixed(3), (p[0] - opened).toFixed(3), (p[1] * 100).toFixed(4), p[2].toFixed(3)]),
    );
  }
  if (what === 'crystal') {
    return csv(['run time s', 'rate nm/s', 'band low nm/s', 'band high nm/s'], model.ratePoints.values().map((p) => [p[0].toFixed(3), p[1], p[2], p[3]]));
  }
  const o = model.outcome;
  if (!o) return csv(['wavelength nm'], []);
  return csv(
    ['wavelength nm', 'design T %', 'as deposited T %', 'design R %', 'as deposited R %'],
    o.wavelengthsNm.map((w, i) => [w, (o.design.T[i] * 100).toFixed(4), (o.deposited.T[i] * 100).toFixed(4), (o.design.R[i] * 100).toFixed(4), (o.deposited.R[i] * 100).toFixed(4)]),
  );
}

async function downloadChart(what, as) {
  const chart = charts[what];
  const content = as === 'csv' ? readingsCsv(what) : as === 'png' ? await chartPng(chart.chart.plot) : chartSvg(chart.chart.plot, chart.describe());
  const url = blobUrl(content, as === 'csv' ? 'text/csv;charset=utf-8' : 'image/svg+xml');
  download(`${fileStem(what)}.${as}`, url);
  // The browser has taken the file once the link was followed; the URL can go a little later.
  setTimeout(() => URL.revokeObjectURL(url), 10000);
}

// ---- the large-type view: status, thickness and trace, to read from afar ---------------------
function setLarge(large) {
  document.body.dataset.large = String(large);
  $('large-toggle').setAttribute('aria-pressed', String(large));
  $('large-toggle').textContent = large ? 'Normal type' : 'Large type';
  setLargeType(large);
  if (large) showView('live');
  schedule('trace', 'rate', 'outcome');
}

// ---- wiring -------------------------------------------------------------------------------
for (const b of document.querySelectorAll('[data-download]')) b.addEventListener('click', () => void downloadChart(b.dataset.download, b.dataset.as));
$('large-toggle').addEventListener('click', () => setLarge(document.body.dataset.large !== 'true'));
document.addEventListener('keydown', (event) => {
  // L toggles large type, except while typing or with a modifier (the browser's own keys).
  if (event.key.toLowerCase() !== 'l' || event.ctrlKey || event.metaKey || event.altKey) return;
  if (event.target.closest?.('input, select, textarea, dialog')) return;
  setLarge(document.body.dataset.large !== 'true');
});
$('nav-live').addEventListener('click', () => showView('live'));
$('nav-history').addEventListener('click', () => showView('history'));
$('history-refresh').addEventListener('click', () => void loadHistory());
$('replay-back').addEventListener('click', () => switchFeed('live'));
$('runs-body').addEventListener('click', (event) => {
  const target = event.target.closest('button');
  if (!target) return;
  if (target.dataset.summary) void showSummary(target.dataset.summary);
  if (target.dataset.replay) {
    switchFeed('replay', { id: target.dataset.replay, speed: Number($('replay-speed').value) });
    showView('live');
  }
});
for (const b of document.querySelectorAll('[data-x]')) {
  b.addEventListener('click', () => {
    for (const o of document.querySelectorAll('[data-x]')) o.setAttribute('aria-pressed', String(o === b));
    charts.trace.setMode(b.dataset.x);
    schedule('trace');
  });
}
for (const b of document.querySelectorAll('[data-q]')) {
  b.addEventListener('click', () => {
    model.quantity = b.dataset.q;
    schedule('outcome');
  });
}
$('command-buttons').addEventListener('click', (event) => {
  const b = event.target.closest('button.cmd');
  if (b && !b.disabled) void sendCommand(b.dataset.action);
});
function toggleRow(event) {
  const row = event.target.closest('tr[data-layer]');
  if (!row || (event.type === 'keydown' && event.key !== 'Enter' && event.key !== ' ')) return;
  event.preventDefault();
  const n = Number(row.dataset.layer);
  if (!model.openRows.delete(n)) model.openRows.add(n);
  renderRows();
  focusRow(n);
}
const focusRow = (n) => $('stack-body').querySelector(`tr[data-layer="${n}"]`)?.focus();
$('stack-body').addEventListener('click', toggleRow);
$('stack-body').addEventListener('keydown', toggleRow);
$('log-list').addEventListener('click', (event) => {
  const b = event.target.closest('button.ack');
  if (b && !b.disabled) void sendCommand('acknowledge', b.dataset.alert);
});
$('token-form').addEventListener('submit', (event) => {
  event.preventDefault();
  const value = $('token-input').value.trim();
  if (value) void checkToken(value);
});
$('token-forget').addEventListener('click', () => {
  model.tokenState = 'none';
  forgetToken();
  schedule('controls', 'log');
});
$('opt-sound').addEventListener('change', (event) => {
  model.sound = event.target.checked;
  if (model.sound && !audio && typeof AudioContext !== 'undefined') audio = new AudioContext();
  if (model.sound) {
    void audio?.resume();
    tone('info');
  }
});
$('opt-notify').addEventListener('change', async (event) => {
  const box = event.target;
  if (!box.checked) {
    model.notify = false;
    return;
  }
  if (typeof Notification === 'undefined') {
    box.checked = false;
    $('cmd-result').textContent = 'This browser does not offer notifications.';
    return;
  }
  const permission = Notification.permission === 'granted' ? 'granted' : await Notification.requestPermission();
  model.notify = permission === 'granted';
  box.checked = model.notify;
  if (!model.notify) $('cmd-result').textContent = 'Notifications were not allowed by the browser.';
});

if (model.token) void checkToken(model.token);
connect();
schedule('status', 'controls');
