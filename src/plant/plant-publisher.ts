/**
 * Publishing a run to the plant's broker. The publisher is one more subscriber of the run hub:
 * the hub's listener only appends to a list and schedules a flush on the event loop, so the
 * broker is never in the cutting path — a broker that is down, slow or refusing changes no
 * decision and costs the reading that carries a cut nothing but that append.
 *
 * Contract:
 * - `events`, `layers` and `summary` (QoS 1) wait in one queue of at most `queueLimit` messages
 *   while the broker is away; when it is full the oldest is dropped and counted. They are handed
 *   to the client in the order they were made, at most 64 unacknowledged at a time (those the
 *   client keeps and sends again after a reconnect), so a subscriber sees them in order.
 * - `state` (QoS 1, retained) is not queued: only the newest is kept and sent once the broker
 *   is back. It is sent when the hub's status changes and every `statePeriodMs` (time to cut).
 * - `readings` (QoS 0) are sent only while connected, at most `readingsPerS` per channel per
 *   second of run time.
 * - Losing the broker raises the informational alert `broker-unreachable` once per episode,
 *   its return `broker-restored` with the count dropped meanwhile, through `raise`.
 */
import { connect as mqttConnect, type IClientOptions, type MqttClient } from 'mqtt';
import { ALERTS } from '../pipeline/codes.ts';
import type { RunEvent } from '../pipeline/events.ts';
import type { RunHub } from '../server/run-hub.ts';
import { buildRunSummary } from '../server/run-summary.ts';
import type { HubMessage } from '../server/views.ts';
import {
  PLANT_FORMAT_VERSION,
  PLANT_TOPICS,
  plantTopic,
  PUBLISHED_EVENTS,
  type PlantEvent,
  type PlantLayer,
  type PlantReading,
  type PlantState,
  type PlantSummary,
  type PlantTopic,
} from './plant-messages.ts';
import type { BrokerCredentials, PlantSettings } from './plant-settings.ts';

type AlertEvent = Extract<RunEvent, { type: 'alert' }>;

export interface PlantPublisherOptions {
  settings: PlantSettings;
  /** The chamber's topic level. */
  chamber: string;
  hub: RunHub;
  credentials?: BrokerCredentials | undefined;
  /** The certificate authority's PEM text for mqtts. */
  ca?: string | undefined;
  /** Puts an alert into the run's stream (the hub's feed, the journal, the console). */
  raise: (alert: AlertEvent) => void;
  /** The state's period, ms (default 1000). */
  statePeriodMs?: number;
  /** Client options a test sets (reconnect period, say). */
  client?: Partial<IClientOptions>;
}

export interface PlantStats {
  /** QoS 1 messages acknowledged by the broker. */
  acknowledged: number;
  /** QoS 1 messages dropped from a full queue. */
  dropped: number;
  /** QoS 1 messages not yet acknowledged. */
  waiting: number;
  /** QoS 0 readings sent. */
  readings: number;
  connected: boolean;
}

export interface PlantPublisher {
  /** The chamber's dashboard address, published in the state. */
  setDashboard(url: string | null): void;
  stats(): PlantStats;
  /**
   * Publishes the final state (offline) and ends the connection, waiting up to `timeoutMs` for
   * the queue to drain while the broker answers.
   */
  close(timeoutMs?: number): Promise<PlantStats>;
}

interface Outgoing {
  topic: PlantTopic;
  payload: unknown;
}

/** Messages handed to the client at once before the broker's acknowledgements are awaited. */
const IN_FLIGHT = 64;

export function createPlantPublisher(options: PlantPublisherOptions): PlantPublisher {
  const { settings, chamber, hub } = options;
  const topic = (t: PlantTopic): string => plantTopic(settings.prefix, chamber, t);
  const runId = hub.runId;
  const base = { v: PLANT_FORMAT_VERSION, chamber };
  const offline: PlantState = { ...base, online: false, at: null, dashboard: null, runId, recipe: hub.recipe.name, source: hub.source, status: null, openAlerts: [], dropped: 0 };

  // Filled by the hub's listener (the decision path), emptied by `flush` (the event loop).
  let incoming: HubMessage[] = [];
  const queue: Outgoing[] = [];
  let queueHead = 0;
  let inFlight = 0;
  let dropped = 0;
  let droppedThisEpisode = 0;
  let acknowledged = 0;
  let readingsSent = 0;
  let seq = 0;
  let flushScheduled = false;
  let stateDue = true;
  let stateInFlight = false;
  let dashboard: string | null = null;
  let closing = false;
  let away = false;
  let lastError = '';
  let alertCount = 0;
  const lastReadingS = { optical: Number.NEGATIVE_INFINITY, crystal: Number.NEGATIVE_INFINITY };
  const readingGapS = 1 / settings.readingsPerS;
  let drained: (() => void) | null = null;

  const client: MqttClient = mqttConnect(settings.url, {
    clientId: `fringe-${chamber}-${Math.random().toString(16).slice(2, 10)}`,
    clean: true,
    connectTimeout: 5000,
    reconnectPeriod: 1000,
    // A broker that refuses us (credentials being put right, say) is asked again, as one that is down.
    reconnectOnConnackError: true,
    // QoS 0 readings are sent only while connected; the client must not hoard them either.
    queueQoSZero: false,
    will: { topic: topic('state'), payload: Buffer.from(JSON.stringify(offline)), qos: 1, retain: true },
    ...(options.credentials ? { username: options.credentials.username, password: options.credentials.password } : {}),
    ...(options.ca !== undefined ? { ca: options.ca } : {}),
    ...options.client,
  });

  client.on('connect', () => {
    if (away) {
      const lost = droppedThisEpisode;
      droppedThisEpisode = 0;
      away = false;
      raise('broker-restored', lost === 0 ? 'nothing was dropped' : `${lost} messages were dropped while it was away (the queue holds ${settings.queueLimit})`);
    }
    lastError = '';
    stateDue = true;
    schedule();
  });
  client.on('error', (error) => {
    lastError = error.message;
  });
  client.on('close', () => {
    stateInFlight = false;
    if (closing || away) return;
    away = true;
    raise('broker-unreachable', `${settings.url}${lastError ? `: ${lastError}` : ''}`);
  });

  const unsubscribe = hub.subscribe((message) => {
    if (message.type === 'snapshot') return;
    incoming.push(message);
    schedule();
  });
  const timer = setInterval(() => {
    stateDue = true;
    schedule();
  }, options.statePeriodMs ?? 1000);
  timer.unref();

  function schedule(): void {
    if (flushScheduled) return;
    flushScheduled = true;
    setImmediate(flush);
  }

  function raise(code: 'broker-unreachable' | 'broker-restored', detail: string): void {
    const { severity, sentence } = ALERTS[code];
    const nowS = hub.status().nowS;
    options.raise({ type: 'alert', timeS: Number.isFinite(nowS) ? nowS : 0, id: `P${++alertCount}`, severity, code, message: `${sentence} (${detail})`, layer: null });
  }

  function enqueue(t: PlantTopic, payload: unknown): void {
    queue.push({ topic: t, payload });
    if (queue.length - queueHead > settings.queueLimit) {
      queueHead++;
      dropped++;
      droppedThisEpisode++;
    }
    if (queueHead > 1024 && queueHead * 2 > queue.length) {
      queue.splice(0, queueHead);
      queueHead = 0;
    }
  }

  function flush(): void {
    flushScheduled = false;
    const messages = incoming;
    incoming = [];
    // What waited goes first, so that the queue has room for what is new.
    sendQueued();
    const connected = client.connected && !closing;
    for (const m of messages) take(m, connected);
    sendQueued();
    if (!client.connected) return;
    if (stateDue && !stateInFlight) {
      stateDue = false;
      stateInFlight = true;
      send('state', closing ? { ...buildState(), online: false } : buildState(), () => {
        stateInFlight = false;
        schedule();
      });
    }
    if (inFlight === 0 && queueHead === queue.length && !stateInFlight) drained?.();
  }

  function sendQueued(): void {
    if (!client.connected) return;
    while (inFlight < IN_FLIGHT && queueHead < queue.length) {
      const m = queue[queueHead] as Outgoing;
      queue[queueHead++] = undefined as unknown as Outgoing;
      inFlight++;
      send(m.topic, m.payload, (error) => {
        inFlight--;
        if (!error) acknowledged++;
        schedule();
      });
    }
    if (queueHead === queue.length) {
      queue.length = 0;
      queueHead = 0;
    }
  }

  function take(message: HubMessage, connected: boolean): void {
    switch (message.type) {
      case 'event': {
        const event = message.event;
        if (PUBLISHED_EVENTS.has(event.type)) enqueue('events', { ...base, runId, seq: ++seq, event } satisfies PlantEvent);
        if (event.type === 'layer-finished') {
          const row = hub.snapshot().layers.find((l) => l.number === event.layer);
          if (row) enqueue('layers', { ...base, runId, layer: row } satisfies PlantLayer);
        }
        if (event.type === 'run-finished') {
          const summary = buildRunSummary(hub.snapshot(), hub.alertHistory(), { runId: runId ?? '', source: hub.source });
          enqueue('summary', { ...base, summary } satisfies PlantSummary);
        }
        stateDue = true;
        break;
      }
      case 'status':
        stateDue = true;
        break;
      case 'optical': {
        const [timeS, signal, chipNm] = message.point;
        if (!connected || settings.readingsPerS === 0 || timeS - lastReadingS.optical < readingGapS) break;
        lastReadingS.optical = timeS;
        publishReading({ ...base, runId, channel: 'optical', layer: message.layer, timeS, signal, chipNm });
        break;
      }
      case 'crystal': {
        const [timeS, rateNmPerS] = message.point;
        if (!connected || settings.readingsPerS === 0 || timeS - lastReadingS.crystal < readingGapS) break;
        lastReadingS.crystal = timeS;
        publishReading({ ...base, runId, channel: 'crystal', timeS, rateNmPerS, partNm: message.partNm, frequencyHz: message.frequencyHz });
        break;
      }
      default:
        break;
    }
  }

  function publishReading(reading: PlantReading): void {
    readingsSent++;
    send('readings', reading, () => undefined);
  }

  function send(t: PlantTopic, payload: unknown, done: (error?: Error) => void): void {
    const { qos, retain } = PLANT_TOPICS[t];
    client.publish(topic(t), JSON.stringify(payload), { qos, retain }, (error) => done(error));
  }

  function buildState(): PlantState {
    const status = hub.status();
    return {
      ...offline,
      online: true,
      at: new Date().toISOString(),
      dashboard,
      status,
      openAlerts: hub.alertHistory().filter((a) => a.open),
      dropped,
    };
  }

  /**
   * Ends with a DISCONNECT when nothing is unacknowledged, so that the broker discards the will:
   * a forced end only drops the socket, and the broker would then publish the will (offline, no
   * time, nothing dropped) over the final state it retains. Forced when the broker is away, holds
   * messages unacknowledged after the drain, or does not close within `timeoutMs`.
   */
  async function endConnection(timeoutMs: number): Promise<void> {
    if (!client.connected || inFlight > 0 || stateInFlight) {
      await client.endAsync(true).catch(() => undefined);
      return;
    }
    let timer: NodeJS.Timeout | undefined;
    const ended = client.endAsync(false).catch(() => undefined);
    const late = new Promise<'late'>((resolve) => {
      timer = setTimeout(() => resolve('late'), timeoutMs);
    });
    if ((await Promise.race([ended, late])) === 'late') {
      client.stream.destroy();
      await ended;
    }
    clearTimeout(timer);
  }

  function stats(): PlantStats {
    return { acknowledged, dropped, waiting: queue.length - queueHead + inFlight, readings: readingsSent, connected: client.connected };
  }

  return {
    setDashboard(url) {
      dashboard = url;
      stateDue = true;
      schedule();
    },
    stats,
    async close(timeoutMs = 2000) {
      unsubscribe();
      clearInterval(timer);
      flush();
      if (client.connected) {
        // The last state says the chamber has gone offline on purpose (the will covers a crash).
        closing = true;
        stateDue = true;
        stateInFlight = false;
        await new Promise<void>((resolve) => {
          const t = setTimeout(resolve, timeoutMs);
          drained = () => {
            clearTimeout(t);
            resolve();
          };
          flush();
        });
      }
      closing = true;
      const final = stats();
      await endConnection(timeoutMs);
      return { ...final, connected: false };
    },
  };
}
