/**
 * The summary a run leaves in `runs/<id>/summary.json`: per layer the target, the cut reason,
 * the estimated achieved thickness and its error against the target (and, for a simulated run,
 * the true thickness the chamber deposited); for the run, how many layers were deposited and the
 * rms error over the layers a rule cut (History shows these).
 */
import type { AlertView, RunSnapshot } from './views.ts';

export interface RunSummaryLayer {
  number: number;
  material: string;
  targetNm: number;
  cut: string;
  cutReason: string | null;
  skipped: boolean;
  /** Its shutter opened: deposited wholly or in part (a layer an abort ended has no estimate). */
  deposited: boolean;
  estimatedNm: number | null;
  errorNm: number | null;
  errorPercent: number | null;
  /** Simulated runs: what the chamber really deposited, nm, and its error, %. */
  trueNm?: number;
  trueErrorPercent?: number;
}

/** What History shows of a run: what was deposited, and how well the rules cut. */
export interface RunFigures {
  /** Layers the recipe has. */
  layersPlanned: number;
  /** Layers deposited, wholly or in part (cut, skipped, or cut short by an abort). */
  layersDeposited: number;
  /** Layers a rule cut (not the operator, not skipped, not an abort): the rms is over these. */
  layersCutByRule: number;
  /** Root-mean-square of those layers' estimated errors, % (null when none). */
  rmsErrorPercent: number | null;
  /** Simulated runs: the same over their true errors, % (null otherwise). */
  rmsTrueErrorPercent: number | null;
}

/** Cuts that are no rule's: the operator's, and an abort's. */
const NOT_A_RULE = new Set(['operator', 'abort']);

/**
 * The run's figures from its layers (a summary's, this version's or an older one's): a layer
 * whose shutter opened was deposited (in an older summary, one with an estimate); one a rule cut
 * counts in the rms.
 */
export function runFigures(layers: readonly Partial<Record<keyof RunSummaryLayer, unknown>>[]): RunFigures {
  const deposited = layers.filter((l) => (typeof l.deposited === 'boolean' ? l.deposited : typeof l.estimatedNm === 'number'));
  const byRule = deposited.filter((l) => typeof l.estimatedNm === 'number').filter((l) => l.skipped !== true && typeof l.cutReason === 'string' && !NOT_A_RULE.has(l.cutReason));
  const rms = (key: 'errorPercent' | 'trueErrorPercent'): number | null => {
    const values = byRule.map((l) => l[key]).filter((e): e is number => typeof e === 'number' && Number.isFinite(e));
    return values.length > 0 ? Math.sqrt(values.reduce((sum, e) => sum + e * e, 0) / values.length) : null;
  };
  return {
    layersPlanned: layers.length,
    layersDeposited: deposited.length,
    layersCutByRule: byRule.length,
    rmsErrorPercent: rms('errorPercent'),
    rmsTrueErrorPercent: rms('trueErrorPercent'),
  };
}

export interface RunSummary extends RunFigures {
  runId: string;
  recipe: string;
  source: string;
  outcome: 'complete' | 'aborted' | 'incomplete';
  durationS: number;
  layers: RunSummaryLayer[];
  alerts: { id: string; severity: string; code: string; layer: number | null; message: string }[];
  seed?: number;
  profile?: string;
}

export function buildRunSummary(
  snapshot: RunSnapshot,
  alertHistory: readonly AlertView[],
  extra: { runId: string; source: string; seed?: number; profile?: string; trueNm?: readonly number[] },
): RunSummary {
  const phase = snapshot.status.phase;
  const outcome = phase === 'finished' ? 'complete' : phase === 'aborted' ? 'aborted' : 'incomplete';
  const alerts = alertHistory.map((a) => ({ id: a.id, severity: a.severity, code: a.code, layer: a.layer, message: a.message }));
  const layers = snapshot.layers.map((row, i) => {
      const layer: RunSummaryLayer = {
        number: row.number,
        material: row.material,
        targetNm: row.targetNm,
        cut: row.cut,
        cutReason: row.cutReason,
        skipped: row.skipped,
        deposited: row.status !== 'future',
        estimatedNm: row.estimatedNm,
        errorNm: row.errorNm,
        errorPercent: row.errorPercent,
      };
      const trueNm = extra.trueNm?.[i];
      if (trueNm !== undefined && row.status === 'past') {
        layer.trueNm = trueNm;
        layer.trueErrorPercent = (100 * (trueNm - row.targetNm)) / row.targetNm;
      }
      return layer;
    });
  return {
    runId: extra.runId,
    recipe: snapshot.recipe,
    source: extra.source,
    outcome,
    durationS: snapshot.status.nowS,
    ...runFigures(layers),
    layers,
    alerts,
    ...(extra.seed !== undefined ? { seed: extra.seed } : {}),
    ...(extra.profile !== undefined ? { profile: extra.profile } : {}),
  };
}
