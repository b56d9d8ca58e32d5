/**
 * The summary a run leaves in `runs/<id>/summary.json`: per layer the target, the cut reason,
 * the estimated achieved thickness and its error against the target (and, for a simulated run,
 * the true thickness the chamber deposited).
 */
import type { AlertView, RunSnapshot } from './views.ts';

export interface RunSummaryLayer {
  number: number;
  material: string;
  targetNm: number;
  cut: string;
  cutReason: string | null;
  skipped: boolean;
  estimatedNm: number | null;
  errorNm: number | null;
  errorPercent: number | null;
  /** Simulated runs: what the chamber really deposited, nm, and its error, %. */
  trueNm?: number;
  trueErrorPercent?: number;
}

export interface RunSummary {
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
  return {
    runId: extra.runId,
    recipe: snapshot.recipe,
    source: extra.source,
    outcome,
    durationS: snapshot.status.nowS,
    layers: snapshot.layers.map((row, i) => {
      const layer: RunSummaryLayer = {
        number: row.number,
        material: row.material,
        targetNm: row.targetNm,
        cut: row.cut,
        cutReason: row.cutReason,
        skipped: row.skipped,
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
    }),
    alerts,
    ...(extra.seed !== undefined ? { seed: extra.seed } : {}),
    ...(extra.profile !== undefined ? { profile: extra.profile } : {}),
  };
}
