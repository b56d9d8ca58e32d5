/* global document, location, fetch, setInterval, URLSearchParams */
// The floor page: every chamber's state from /api/floor, refreshed each second; read-only.
// Everything the broker said is put on the page as text, never as markup.
const params = new URLSearchParams(location.search);
const viewerToken = params.get('viewer');
const headers = viewerToken ? { 'x-fringe-viewer': viewerToken } : {};
const $ = (id) => document.getElementById(id);

function el(tag, className, text) {
  const node = document.createElement(tag);
  if (className) node.className = className;
  if (text !== undefined && text !== null) node.textContent = String(text);
  return node;
}

const PHASE_WORDS = {
  ready: 'Ready',
  depositing: 'Depositing',
  closing: 'Closing the shutter',
  holding: 'On hold',
  'awaiting-close': 'Waiting for a shutter',
  finished: 'Finished',
  aborted: 'Aborted',
};

function seconds(s) {
  if (s === null || s === undefined) return '–';
  if (s < 60) return `${s.toFixed(0)} s`;
  return `${Math.floor(s / 60)} min ${String(Math.round(s % 60)).padStart(2, '0')} s`;
}

function percent(p) {
  return p === null || p === undefined ? '–' : `${p.toFixed(2)} %`;
}

function chamberCard(c) {
  const item = el('li', 'chamber');
  item.dataset.chamber = c.chamber;
  item.dataset.online = String(c.online);
  item.dataset.phase = c.phase ?? 'none';
  // The whole card opens the chamber's own dashboard when it serves one.
  const card = c.dashboard ? el('a', 'card') : el('div', 'card');
  if (c.dashboard) {
    card.href = c.dashboard;
    card.target = '_blank';
    card.rel = 'noopener noreferrer';
    card.title = `Open ${c.chamber}'s dashboard`;
  }
  const head = el('div', 'card-head');
  head.append(el('h2', 'name', c.chamber), el('span', `badge ${c.online ? 'online' : 'offline'}`, c.online ? 'online' : 'offline'));
  card.append(head);
  const facts = el('dl', 'facts');
  const fact = (label, value, cls) => {
    const row = el('div', cls);
    row.append(el('dt', '', label), el('dd', '', value));
    facts.append(row);
  };
  fact('State', c.phase ? (PHASE_WORDS[c.phase] ?? c.phase) : '–', 'state');
  fact('Recipe', c.recipe ?? '–', 'recipe');
  fact('Layer', c.layer ? `${c.layer} of ${c.layers ?? '?'}${c.material ? ` · ${c.material}` : ''}` : '–', 'layer');
  fact('Time to cut', c.online && c.phase === 'depositing' ? seconds(c.timeToCutS) : '–', 'ttc');
  card.append(facts);
  const alerts = el('ul', 'alerts');
  alerts.setAttribute('aria-label', 'Open alerts');
  for (const a of c.openAlerts) {
    const li = el('li', `alert ${a.severity}`);
    li.append(el('span', 'severity', a.severity), el('span', 'code', a.code), el('span', 'message', a.message));
    alerts.append(li);
  }
  if (c.openAlerts.length === 0) alerts.append(el('li', 'alert none', 'No open alerts'));
  card.append(alerts);
  const runs = el('ol', 'runs');
  runs.setAttribute('aria-label', 'Last runs');
  for (const r of c.lastRuns) {
    const li = el('li', `run ${r.outcome}`);
    li.append(el('span', 'outcome', r.outcome), el('span', 'recipe', r.recipe ?? r.runId), el('span', 'rms', percent(r.rmsErrorPercent)));
    runs.append(li);
  }
  card.append(runs);
  if (c.dropped > 0) card.append(el('p', 'dropped', `${c.dropped} messages to the broker were dropped`));
  item.append(card);
  return item;
}

async function getJson(path) {
  const response = await fetch(viewerToken ? `${path}?viewer=${encodeURIComponent(viewerToken)}` : path, { headers, cache: 'no-store' });
  if (!response.ok) throw new Error(`${path}: ${response.status}`);
  return response.json();
}

async function refresh() {
  try {
    const floor = await getJson('/api/floor');
    $('chambers').replaceChildren(...floor.chambers.map(chamberCard));
    $('empty').hidden = floor.chambers.length > 0;
    const broker = floor.broker ? (floor.broker.connected ? ` · broker ${floor.broker.url}` : ` · the broker ${floor.broker.url} does not answer: the last known states are shown`) : '';
    $('feed').textContent = `${floor.chambers.length} chamber${floor.chambers.length === 1 ? '' : 's'}${broker} · updated ${new Date().toLocaleTimeString()}`;
    $('feed').dataset.state = floor.broker && !floor.broker.connected ? 'lost' : 'ok';
  } catch (error) {
    $('feed').textContent = `The floor server does not answer (${error.message}); trying again`;
    $('feed').dataset.state = 'lost';
  }
}

async function refreshHistory() {
  try {
    const { runs } = await getJson('/api/floor/history');
    $('history').hidden = runs.length === 0;
    $('history-rows').replaceChildren(
      ...runs.map((r) => {
        const tr = el('tr');
        for (const cell of [r.chamber, r.runId, r.recipe ?? '–', r.startedAt ?? '–', r.outcome, r.layers ?? '–', percent(r.rmsErrorPercent)]) tr.append(el('td', '', cell));
        return tr;
      }),
    );
  } catch {
    // The chambers above say when the server is lost.
  }
}

void refresh();
void refreshHistory();
setInterval(refresh, 1000);
setInterval(refreshHistory, 15000);
