/**
 * The words for how a layer is measured and cut, defined once: the command line prints them,
 * and the dashboard gets them from the server (`/words.js`, built from this module), so that the
 * status line, the readout, the stack table, the log and the terminal say the same thing.
 * Journals keep their codes (`model-fit`, `level`, …) unchanged; codes become words only here,
 * at display.
 */
import type { CutMode } from '../model/plan/recipe.ts';
import type { CutReason } from './events.ts';

/** How optical layers are decided: the controller's `estimator` option. */
export type Estimator = 'plain' | 'fit';

export const ESTIMATOR_WORDS: Readonly<Record<Estimator, string>> = {
  fit: 'model fit',
  plain: 'plain rules',
};

/** A layer's cut mode as planned: the rule that cuts it when no model fit does. */
export const CUT_MODE_WORDS: Readonly<Record<CutMode, string>> = {
  'turning-point': 'turning point',
  level: 'trigger level',
  crystal: 'crystal thickness',
  time: 'time',
};

/** The same, short, for narrow columns (the plan's table, the study's). */
export const CUT_MODE_SHORT: Readonly<Record<CutMode, string>> = {
  'turning-point': 'turn. point',
  level: 'trig. level',
  crystal: 'crystal',
  time: 'time',
};

/** What cut a layer (the `cut` event's reason). */
export const CUT_REASON_WORDS: Readonly<Record<CutReason, string>> = {
  'model-fit': 'model fit',
  'trigger-level': 'trigger level',
  'turning-point': 'turning point',
  'crystal-thickness': 'crystal thickness',
  'crystal-calibrated': 'crystal, calibrated',
  time: 'time',
  'thickness-ceiling': 'thickness ceiling',
  'time-ceiling': 'time ceiling',
  operator: 'operator',
  abort: 'abort',
};

/** The same, short, for narrow columns. */
export const CUT_REASON_SHORT: Readonly<Record<CutReason, string>> = {
  'model-fit': 'model fit',
  'trigger-level': 'trig. level',
  'turning-point': 'turn. point',
  'crystal-thickness': 'crystal',
  'crystal-calibrated': 'crystal cal.',
  time: 'time',
  'thickness-ceiling': 'ceiling',
  'time-ceiling': 'time ceil.',
  operator: 'operator',
  abort: 'aborted',
};

/** Where a thickness figure comes from (the readout's source). */
export const ESTIMATE_SOURCE_WORDS = {
  fit: 'model fit',
  crystal: 'crystal',
  clock: 'clock',
} as const;

/**
 * The rule that will cut a layer planned in `mode` under `estimator`: the model fit cuts the
 * optical layers (turning point, trigger level) while it runs; a crystal layer is cut on the
 * crystal, calibrated by the fits once its material's rate is known.
 */
export function cutRuleFor(mode: CutMode, estimator: Estimator, calibrated = false): CutReason {
  if (estimator === 'fit' && (mode === 'level' || mode === 'turning-point')) return 'model-fit';
  switch (mode) {
    case 'level':
      return 'trigger-level';
    case 'turning-point':
      return 'turning-point';
    case 'crystal':
      return calibrated ? 'crystal-calibrated' : 'crystal-thickness';
    case 'time':
      return 'time';
  }
}

/** The cut a layer planned in `mode` gets, in words: the rule, and the plan's mode when the fit cuts. */
export function plannedCutWords(mode: CutMode, estimator: Estimator): string {
  const rule = cutRuleFor(mode, estimator);
  return rule === 'model-fit' ? `${CUT_REASON_WORDS[rule]} (plan: ${CUT_MODE_WORDS[mode]})` : CUT_MODE_WORDS[mode];
}

/** A code in words: the word for a known code, else the code itself (a newer journal's). */
export function wordFor<K extends string>(table: Readonly<Record<K, string>>, code: string): string {
  return Object.hasOwn(table, code) ? table[code as K] : code;
}

const MODES = Object.keys(CUT_MODE_WORDS) as CutMode[];
const planned = (estimator: Estimator): Record<CutMode, string> => Object.fromEntries(MODES.map((m) => [m, plannedCutWords(m, estimator)])) as Record<CutMode, string>;

/** Everything the dashboard needs, as one JSON-safe object (served as `/words.js`). */
export const DASHBOARD_WORDS = {
  planned: { fit: planned('fit'), plain: planned('plain') },
  estimator: ESTIMATOR_WORDS,
  mode: CUT_MODE_WORDS,
  modeShort: CUT_MODE_SHORT,
  reason: CUT_REASON_WORDS,
  reasonShort: CUT_REASON_SHORT,
  source: ESTIMATE_SOURCE_WORDS,
} as const;
