// Numbers and words for the dashboard: units on every number, signals in percent, time as mm:ss.
// The words for estimators and cut rules come from the server (/words.js, built from the module
// the command line prints them from); journal codes become words only here.
import { WORDS } from '/words.js';

/** A value or an en dash when it is missing. */
const ok = (x) => typeof x === 'number' && Number.isFinite(x);

/** Seconds as mm:ss (h:mm:ss from an hour). */
export function clock(seconds) {
  if (!ok(seconds)) return '–';
  const s = Math.max(0, Math.round(seconds));
  const h = Math.floor(s / 3600);
  const m = Math.floor((s % 3600) / 60);
  const ss = String(s % 60).padStart(2, '0');
  return h > 0 ? `${h}:${String(m).padStart(2, '0')}:${ss}` : `${String(m).padStart(2, '0')}:${ss}`;
}

export function nm(x, digits = 2) {
  return ok(x) ? `${x.toFixed(digits)} nm` : '–';
}

/** A signal fraction as percent. */
export function percent(fraction, digits = 2) {
  return ok(fraction) ? `${(fraction * 100).toFixed(digits)} %` : '–';
}

export function rate(x) {
  return ok(x) ? `${x.toFixed(3)} nm/s` : '–';
}

export function signed(x, digits, unit) {
  if (!ok(x)) return '–';
  const sign = x > 0 ? '+' : x < 0 ? '−' : '±';
  return `${sign}${Math.abs(x).toFixed(digits)}${unit}`;
}

export function frequency(hz) {
  return ok(hz) ? `${(hz / 1e6).toFixed(6)} MHz` : '–';
}

export function bytes(n) {
  if (!ok(n)) return '–';
  if (n < 1024) return `${n} B`;
  if (n < 1024 * 1024) return `${(n / 1024).toFixed(0)} KiB`;
  return `${(n / 1024 / 1024).toFixed(1)} MiB`;
}

export const PHASE_WORDS = {
  connecting: 'Connecting',
  offline: 'Not connected',
  ready: 'Ready',
  depositing: 'Depositing',
  closing: 'Cutting',
  holding: 'On hold',
  'awaiting-close': 'Waiting for a shutter to close',
  finished: 'Run complete',
  aborted: 'Aborted',
};

/** A code in words from one of the tables; an unknown code (a newer journal's) as it is. */
const word = (table, code) => (Object.hasOwn(table, code) ? table[code] : code);

/** A cut mode as planned (`level`, …). */
export const modeWords = (mode) => word(WORDS.mode, mode);
/** What cut a layer, or is cutting it (`model-fit`, …); `short` for narrow columns. */
export const reasonWords = (reason, short = false) => word(short ? WORDS.reasonShort : WORDS.reason, reason);
/** The cut a layer planned in `mode` gets under the run's estimator. */
export const plannedCutWords = (mode, estimator) => word(WORDS.planned[estimator] ?? WORDS.planned.plain, mode);
export const estimatorWords = (estimator) => word(WORDS.estimator, estimator);

/** Where the readout's thickness comes from, and what its ± means. */
export const SOURCE_WORDS = WORDS.source;
export const SOURCE_TITLES = {
  fit: "the model fit of the layer's optical signal: its thickness at the design index, as the cut compares it, and its rms",
  crystal: "the crystal's thickness; ± the plan's expected rms precision of this layer's cut",
  clock: "elapsed time at the planned rate (no crystal); ± the plan's expected rms precision of this layer's cut",
};

export const SEVERITY_WORDS = { info: 'Note', warning: 'Warning', critical: 'Critical' };
export const SEVERITY_MARKS = { info: '●', warning: '▲', critical: '■' };

/** One log line for an event: a mark, the words, and the severity for alerts. */
export function describeEvent(e, estimator = 'plain') {
  switch (e.type) {
    case 'run-started':
      return { mark: '▶', text: `Run started: ${e.layers} layers` };
    case 'layer-started':
      return { mark: '▶', text: `Layer ${e.layer} (${e.material}) started: target ${nm(e.targetNm)}, cut on ${plannedCutWords(e.cut, estimator)}` };
    case 'shutter':
      return { mark: e.command.action === 'open' ? '○' : '◌', text: `Shutter ${e.command.source} ${e.command.action === 'open' ? 'opened' : 'closed'} (layer ${e.command.layer})` };
    case 'approaching-cut':
      return { mark: '◆', text: `Layer ${e.layer}: cut expected in ${clock(e.expectedInS)}` };
    case 'cut':
      return {
        mark: '✂',
        text: `Layer ${e.layer} cut on ${reasonWords(e.reason)} at ≈ ${nm(e.estimatedNm)}${ok(e.signal) ? `, signal ${percent(e.signal)}` : ''}`,
      };
    case 'layer-finished':
      return e.skipped
        ? { mark: '⤼', text: `Layer ${e.layer} skipped at ≈ ${nm(e.estimatedNm)}` }
        : { mark: '✓', text: `Layer ${e.layer} finished: ≈ ${nm(e.estimatedNm)}${ok(e.crystalNm) ? ` (crystal ${nm(e.crystalNm)})` : ''}` };
    case 'mode-changed':
      return { mark: '↪', text: `Layer ${e.layer}: cut mode ${modeWords(e.from)} → ${modeWords(e.to)}` };
    case 'alert':
      return { mark: SEVERITY_MARKS[e.severity] ?? '●', severity: e.severity, text: `${SEVERITY_WORDS[e.severity] ?? e.severity} ${e.id}: ${e.message}` };
    case 'alert-acknowledged':
      return { mark: '✓', text: `Alert ${e.id} acknowledged` };
    case 'replanned':
      return { mark: '↻', text: `Re-planned from layer ${e.fromLayer}` };
    case 'held':
      return { mark: '❚❚', text: `Layer ${e.layer} held: shutter closed` };
    case 'resumed':
      return { mark: '▶', text: `Layer ${e.layer} resumed` };
    case 'run-finished':
      return e.outcome === 'complete' ? { mark: '✓', text: 'Run complete' } : { mark: '■', severity: 'critical', text: 'Run aborted' };
    default:
      return { mark: '·', text: e.type };
  }
}
