/** Alerts, and faults counted and reported through them, thinned. Pure functions of the controller's state. */
import type { ResolvedRecipe } from '../model/plan/recipe.ts';
import { ALERTS, type AlertCode } from './codes.ts';
import type { ControllerState, FaultReport } from './controller-state.ts';
import type { RunEvent } from './events.ts';
import type { FaultCode } from './types.ts';

/** After a fault's first alert, at most one summary of its code per this much run time, s. */
const FAULT_SUMMARY_S = 30;

/** Raises an alert: an event, and an open alert until the operator acknowledges it. */
export function alert(recipe: ResolvedRecipe, s: ControllerState, events: RunEvent[], code: AlertCode, message: string): ControllerState {
  const id = `A${s.alertCount + 1}`;
  const layer = s.phase === 'ready' ? null : (recipe.layers[s.index]?.number ?? null);
  events.push({ type: 'alert', timeS: Number.isFinite(s.nowS) ? s.nowS : 0, id, severity: ALERTS[code].severity, code, message, layer });
  return { ...s, alertCount: s.alertCount + 1, openAlerts: [...s.openAlerts, id] };
}

/**
 * Counts a fault. The first of its code raises its alert; later ones wait for a summary at
 * most every FAULT_SUMMARY_S of run time ({@link reportFaults}), so that a flood shows with its
 * numbers without flooding the alerts.
 */
export function fault(recipe: ResolvedRecipe, s: ControllerState, events: RunEvent[], code: FaultCode, line: string): ControllerState {
  const count = (s.faults[code] ?? 0) + 1;
  const faults = { ...s.faults, [code]: count };
  const nowS = Number.isFinite(s.nowS) ? s.nowS : 0;
  const report = s.faultReports[code];
  if (!report) {
    s = { ...s, faults, faultReports: { ...s.faultReports, [code]: { reported: count, alertedS: nowS, sinceS: Number.NaN } } };
    return alert(recipe, s, events, `fault-${code}`, `${ALERTS[`fault-${code}`].sentence} (${line.slice(0, 60)})`);
  }
  const waiting = report.reported < count - 1;
  const next = waiting ? report : { reported: report.reported, alertedS: report.alertedS, sinceS: nowS };
  return { ...s, faults, faultReports: { ...s.faultReports, [code]: next }, faultsDueS: Math.min(s.faultsDueS, report.alertedS + FAULT_SUMMARY_S) };
}

/** The faults counted since their code's last alert, one summary alert a code. */
export function reportFaults(recipe: ResolvedRecipe, s: ControllerState, events: RunEvent[]): ControllerState {
  const faultReports = { ...s.faultReports };
  for (const [code, report] of Object.entries(s.faultReports) as [FaultCode, FaultReport][]) {
    const count = s.faults[code] ?? 0;
    if (report.reported >= count) continue;
    const more = count - report.reported;
    s = alert(recipe, s, events, `fault-${code}`, `${more} more ${more === 1 ? 'line' : 'lines'} not used since ${report.sinceS.toFixed(1)} s (${count} in all): ${ALERTS[`fault-${code}`].sentence}`);
    faultReports[code] = { reported: count, alertedS: s.nowS, sinceS: Number.NaN };
  }
  return { ...s, faultReports, faultsDueS: Number.POSITIVE_INFINITY };
}
