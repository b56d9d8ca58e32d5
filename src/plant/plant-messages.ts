/**
 * What a chamber publishes to the plant's broker: the topics under `<prefix>/<chamber>/` and
 * their JSON payloads. Every payload carries `v` ({@link PLANT_FORMAT_VERSION}); bump it when a
 * field changes meaning. The floor view reads exactly these.
 */
import type { RunEvent } from '../pipeline/events.ts';
import type { RunSummary } from '../server/run-summary.ts';
import type { AlertView, RunStatus, StackRow } from '../server/views.ts';

export const PLANT_FORMAT_VERSION = 1;

/** The topic suffixes, their QoS and whether the broker keeps the last one. */
export const PLANT_TOPICS = {
  state: { qos: 1, retain: true },
  events: { qos: 1, retain: false },
  layers: { qos: 1, retain: false },
  summary: { qos: 1, retain: true },
  readings: { qos: 0, retain: false },
} as const;
export type PlantTopic = keyof typeof PLANT_TOPICS;

export function plantTopic(prefix: string, chamber: string, topic: PlantTopic): string {
  return `${prefix}/${chamber}/${topic}`;
}

/** The events published on `events`: the run's milestones and every alert (not shutter traffic or re-plans). */
export const PUBLISHED_EVENTS: ReadonlySet<RunEvent['type']> = new Set<RunEvent['type']>([
  'run-started',
  'layer-started',
  'mode-changed',
  'cut',
  'layer-finished',
  'alert',
  'alert-acknowledged',
  'held',
  'resumed',
  'run-finished',
]);

/** `state` (retained): the chamber as it stands; the last will says `online: false`. */
export interface PlantState {
  v: number;
  chamber: string;
  online: boolean;
  /** Wall time it was published (ISO), null in the last will. */
  at: string | null;
  /** The chamber's own dashboard, when it serves one. */
  dashboard: string | null;
  runId: string | null;
  recipe: string | null;
  source: string | null;
  status: RunStatus | null;
  openAlerts: AlertView[];
  /** QoS 1 messages dropped since the start because the queue was full while the broker was away. */
  dropped: number;
}

/** `events`: one run event, numbered from 1 per publisher with no gaps. */
export interface PlantEvent {
  v: number;
  chamber: string;
  runId: string | null;
  seq: number;
  event: RunEvent;
}

/** `layers`: a finished layer as the run's summary will list it. */
export interface PlantLayer {
  v: number;
  chamber: string;
  runId: string | null;
  layer: StackRow;
}

/** `summary` (retained): the run's summary once it has ended. */
export interface PlantSummary {
  v: number;
  chamber: string;
  summary: RunSummary;
}

/** `readings`: decimated points, QoS 0 (lost while the broker is away). */
export type PlantReading =
  | { v: number; chamber: string; runId: string | null; channel: 'optical'; layer: number; timeS: number; signal: number; chipNm: number }
  | { v: number; chamber: string; runId: string | null; channel: 'crystal'; timeS: number; rateNmPerS: number; partNm: number | null; frequencyHz: number | null };
