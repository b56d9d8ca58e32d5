/**
 * The floor: every chamber that publishes under a prefix, as the floor page shows it. It takes
 * the broker's messages (`state` and `summary`), which come from anywhere on the plant network,
 * so every field is checked and anything else is ignored, and the chambers it keeps are bounded.
 */
import { z } from 'zod';
import { PLANT_FORMAT_VERSION } from './plant-messages.ts';

/** A run's outcome as the floor lists it. */
export interface FloorRun {
  chamber: string;
  runId: string;
  recipe: string | null;
  startedAt: string | null;
  outcome: string;
  layers: number | null;
  durationS: number | null;
  /** Root-mean-square of the layers' estimated errors, %. */
  rmsErrorPercent: number | null;
}

export interface FloorAlert {
  severity: string;
  code: string;
  message: string;
  layer: number | null;
}

export interface FloorChamber {
  chamber: string;
  online: boolean;
  /** When the chamber published its state (its own clock), and when the floor received it (ours). */
  at: string | null;
  receivedAt: string;
  /** The chamber's own dashboard: http(s) only. */
  dashboard: string | null;
  runId: string | null;
  recipe: string | null;
  source: string | null;
  phase: string | null;
  running: boolean;
  layer: number | null;
  layers: number | null;
  material: string | null;
  cut: string | null;
  timeToCutS: number | null;
  openAlerts: FloorAlert[];
  dropped: number;
  /** Newest first. */
  lastRuns: FloorRun[];
}

export interface FloorView {
  chambers: FloorChamber[];
  /** The broker the floor listens to, and whether it answers (absent without one). */
  broker?: { url: string; connected: boolean } | null;
}

export interface FloorState {
  /** Takes one message of the broker; returns whether it was understood. */
  take(topic: string, payload: Buffer | string, receivedAt?: Date): boolean;
  /** Runs from journals on disk, merged into each chamber's last runs. */
  addHistory(runs: readonly FloorRun[]): void;
  view(): FloorView;
}

const LAST_RUNS = 5;
const MAX_CHAMBERS = 500;
const MAX_ALERTS = 20;

const text = z.string().max(500);
const num = z.number().finite().nullable().catch(null);
const StateSchema = z.object({
  v: z.literal(PLANT_FORMAT_VERSION),
  online: z.boolean(),
  at: text.nullable().catch(null),
  dashboard: text.nullable().catch(null),
  runId: text.nullable().catch(null),
  recipe: text.nullable().catch(null),
  source: text.nullable().catch(null),
  status: z
    .object({
      phase: text.catch('unknown'),
      running: z.boolean().catch(false),
      layer: num,
      layers: num,
      material: text.nullable().catch(null),
      cut: text.nullable().catch(null),
      timeToCutS: num,
    })
    .nullable()
    .catch(null),
  openAlerts: z
    .array(z.object({ severity: text, code: text, message: text, layer: num }))
    .catch([])
    .transform((a) => a.slice(0, MAX_ALERTS)),
  dropped: z.number().int().min(0).catch(0),
});

const SummarySchema = z.object({
  v: z.literal(PLANT_FORMAT_VERSION),
  summary: z.object({
    runId: text,
    recipe: text.nullable().catch(null),
    outcome: text,
    durationS: num,
    layers: z.array(z.object({ errorPercent: num })).max(10_000).catch([]),
  }),
});

export function createFloorState(prefix: string): FloorState {
  const chambers = new Map<string, FloorChamber>();
  const history = new Map<string, FloorRun[]>();
  const summaries = new Map<string, FloorRun[]>();

  function chamberOf(topic: string, suffix: string): string | null {
    if (!topic.startsWith(`${prefix}/`) || !topic.endsWith(`/${suffix}`)) return null;
    const name = topic.slice(prefix.length + 1, topic.length - suffix.length - 1);
    return /^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$/.test(name) ? name : null;
  }

  function parse(payload: Buffer | string): unknown {
    try {
      return JSON.parse(typeof payload === 'string' ? payload : payload.toString('utf8'));
    } catch {
      return undefined;
    }
  }

  function blank(chamber: string, receivedAt: Date): FloorChamber {
    return {
      chamber,
      online: false,
      at: null,
      receivedAt: receivedAt.toISOString(),
      dashboard: null,
      runId: null,
      recipe: null,
      source: null,
      phase: null,
      running: false,
      layer: null,
      layers: null,
      material: null,
      cut: null,
      timeToCutS: null,
      openAlerts: [],
      dropped: 0,
      lastRuns: [],
    };
  }

  function room(chamber: string): boolean {
    return chambers.has(chamber) || chambers.size < MAX_CHAMBERS;
  }

  function takeState(chamber: string, data: unknown, receivedAt: Date): boolean {
    const parsed = StateSchema.safeParse(data);
    if (!parsed.success || !room(chamber)) return false;
    const s = parsed.data;
    const before = chambers.get(chamber) ?? blank(chamber, receivedAt);
    const status = s.status;
    chambers.set(chamber, {
      ...before,
      online: s.online,
      at: s.at,
      receivedAt: receivedAt.toISOString(),
      // The will carries no run: keep what the chamber last said, marked offline.
      ...(s.at === null && !s.online
        ? {}
        : {
            dashboard: webAddress(s.dashboard),
            runId: s.runId,
            recipe: s.recipe,
            source: s.source,
            phase: status?.phase ?? null,
            running: status?.running ?? false,
            layer: status?.layer ?? null,
            layers: status?.layers ?? null,
            material: status?.material ?? null,
            cut: status?.cut ?? null,
            timeToCutS: status?.timeToCutS ?? null,
            openAlerts: s.openAlerts,
            dropped: s.dropped,
          }),
    });
    return true;
  }

  function takeSummary(chamber: string, data: unknown, receivedAt: Date): boolean {
    const parsed = SummarySchema.safeParse(data);
    if (!parsed.success || !room(chamber)) return false;
    const s = parsed.data.summary;
    if (!chambers.has(chamber)) chambers.set(chamber, blank(chamber, receivedAt));
    const errors = s.layers.map((l) => l.errorPercent).filter((e): e is number => e !== null);
    const run: FloorRun = {
      chamber,
      runId: s.runId,
      recipe: s.recipe,
      startedAt: null,
      outcome: s.outcome,
      layers: s.layers.length,
      durationS: s.durationS,
      rmsErrorPercent: errors.length > 0 ? Math.sqrt(errors.reduce((sum, e) => sum + e * e, 0) / errors.length) : null,
    };
    const list = (summaries.get(chamber) ?? []).filter((r) => r.runId !== run.runId);
    summaries.set(chamber, [run, ...list].slice(0, LAST_RUNS));
    return true;
  }

  return {
    take(topic, payload, receivedAt = new Date()) {
      const state = chamberOf(topic, 'state');
      if (state !== null) return takeState(state, parse(payload), receivedAt);
      const summary = chamberOf(topic, 'summary');
      if (summary !== null) return takeSummary(summary, parse(payload), receivedAt);
      return false;
    },
    addHistory(runs) {
      history.clear();
      for (const run of runs) {
        const list = history.get(run.chamber) ?? [];
        list.push(run);
        history.set(run.chamber, list);
      }
    },
    view() {
      const names = new Set([...chambers.keys(), ...history.keys()]);
      const out: FloorChamber[] = [];
      for (const name of [...names].sort()) {
        const chamber = chambers.get(name) ?? blank(name, new Date(0));
        // Seen on the broker first, then the journals on disk; one entry per run.
        const seen = new Set<string>();
        const lastRuns: FloorRun[] = [];
        const onDisk = [...(history.get(name) ?? [])].sort((a, b) => (b.startedAt ?? '').localeCompare(a.startedAt ?? ''));
        for (const run of [...(summaries.get(name) ?? []), ...onDisk]) {
          if (seen.has(run.runId) || lastRuns.length >= LAST_RUNS) continue;
          seen.add(run.runId);
          lastRuns.push(run);
        }
        out.push({ ...chamber, lastRuns });
      }
      return { chambers: out };
    },
  };
}

/** An address the page may link to: http or https, nothing else (a `javascript:` link is not a dashboard). */
function webAddress(url: string | null): string | null {
  if (url === null) return null;
  try {
    const parsed = new URL(url);
    return parsed.protocol === 'http:' || parsed.protocol === 'https:' ? parsed.href : null;
  } catch {
    return null;
  }
}
