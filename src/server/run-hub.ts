/**
 * The run hub: one run (a simulated run, a replayed journal, later a live chamber) behind the
 * small interface the server needs. It watches the run's inputs and events — it never decides
 * anything — and keeps what the dashboard shows: the status line, the stack table, the current
 * layer's trace, the crystal strip, the open alerts, the log and the outcome spectrum.
 *
 * Contract:
 * - Wire `feed.input` and `feed.event` into the run (`onInput` / `onEvent` of a stepped run),
 *   then `attach(run)`. Inputs are seen before the controller steps on them, events after.
 * - Subscribers get, in order: every event unthinned; readings decimated to at most
 *   `pointsPerS` points per second of run time per channel; a `status` message whenever the
 *   phase, the layer, the cut mode or the open alerts change; and a `snapshot` after the layer,
 *   the plan or the outcome changed (coalesced to one per burst of events).
 * - `command(action)` applies an operator command at the run's current time and says whether
 *   the controller acted on it.
 * - Every number handed out is finite or null.
 */
import { crystalLifeUsed } from '../model/crystal/index.ts';
import { planRun, type LayerPlan, type RunPlan } from '../model/plan/plan.ts';
import type { CutMode, LayerRecipe, ResolvedRecipe } from '../model/plan/recipe.ts';
import type { Severity } from '../pipeline/codes.ts';
import { isGrowing, liveFitEstimate, type ControllerState } from '../pipeline/controller.ts';
import type { CutReason, RunEvent } from '../pipeline/events.ts';
import type { OperatorAction, OperatorCommand, PipelineInput, Reading } from '../pipeline/types.ts';
import { BoundedHistory } from './bounded-history.ts';
import { Decimator, type DecimatedPoint } from './decimator.ts';
import { resolvedStack } from '../pipeline/resolved-stack.ts';
import { outcomeSpectrum } from './outcome.ts';
import { cutRuleFor, type Estimator } from '../pipeline/cut-words.ts';
import {
  VIEW_FORMAT_VERSION,
  type AlertView,
  type CrystalView,
  type HubMessage,
  type LogEntry,
  type OutcomeView,
  type RunSnapshot,
  type RunSourceKind,
  type RunStatus,
  type StackRow,
  type TraceView,
} from './views.ts';

/** What the hub needs of a run: a stepped run satisfies it. */
export interface RunControl {
  readonly state: ControllerState;
  /** Run time reached, s. */
  readonly nowS: number;
  readonly running: boolean;
  apply(input: PipelineInput): void;
}

/** The two callbacks a run reports through. */
export interface RunFeed {
  readonly input: (input: PipelineInput) => void;
  readonly event: (event: RunEvent) => void;
}

export interface RunHubOptions {
  recipe: ResolvedRecipe;
  source: RunSourceKind;
  runId?: string | null;
  /** Multiple of real time the run is paced at (null: live). */
  speed?: number | null;
  /** Points per second of run time per channel (default 30). */
  pointsPerS?: number;
  /** Trace points kept for the current layer before the oldest are thinned 2:1 (default 20000). */
  maxTracePoints?: number;
  /** Rate points kept for the crystal strip before thinning 2:1 (default 4000). */
  maxRatePoints?: number;
  /** Events kept for the log (default 500). */
  maxLog?: number;
  /** Take operator commands (default: yes, except for a replay). */
  acceptCommands?: boolean;
  /** How the run's controller decides optical layers (default `plain`, the controller's default). */
  estimator?: Estimator;
}

export type CommandOutcome =
  | { readonly applied: true; readonly action: OperatorAction; readonly timeS: number; readonly events: readonly RunEvent[] }
  | { readonly applied: false; readonly action: OperatorAction; readonly timeS: number | null; readonly reason: string };

export type HubListener = (message: HubMessage) => void;

export interface RunHub {
  readonly recipe: ResolvedRecipe;
  readonly source: RunSourceKind;
  readonly runId: string | null;
  readonly speed: number | null;
  readonly feed: RunFeed;
  /** Binds the run whose inputs and events come through `feed`. */
  attach(run: RunControl): void;
  snapshot(): RunSnapshot;
  status(): RunStatus;
  /** Returns the unsubscribe function. A listener that throws is unsubscribed. */
  subscribe(listener: HubListener): () => void;
  command(action: OperatorAction, alertId?: string): CommandOutcome;
  /** Every alert raised so far, oldest first, with whether it is still open. */
  alertHistory(): AlertView[];
  /** The plan as it stands: the run's (re-planned after each layer), else the recipe's. */
  planNow(): RunPlan;
}

/** A crystal silent this long no longer gives the thickness (the controller's default too). */
const CRYSTAL_STALE_S = 2;
const SEVERITY_RANK: Record<Severity, number> = { info: 0, warning: 1, critical: 2 };
const SNAPSHOT_EVENTS = new Set<RunEvent['type']>(['run-started', 'layer-started', 'layer-finished', 'replanned', 'mode-changed', 'run-finished']);

interface LayerRecord {
  cut: CutMode;
  reason: CutReason | null;
  estimatedNm: number | null;
  /** The figure the layer-finished event gave (what the log shows), before any refit. */
  firstNm: number | null;
  skipped: boolean;
}

type AlertEvent = Extract<RunEvent, { type: 'alert' }>;

export function createRunHub(options: RunHubOptions): RunHub {
  const recipe = options.recipe;
  const pointsPerS = options.pointsPerS ?? 30;
  const maxTrace = options.maxTracePoints ?? 20000;
  const maxRate = options.maxRatePoints ?? 4000;
  const maxLog = options.maxLog ?? 500;
  const acceptCommands = options.acceptCommands ?? options.source !== 'replay';
  const estimator = options.estimator ?? 'plain';
  const f0 = recipe.crystal.bareFrequencyHz;

  let run: RunControl | undefined;
  const listeners = new Set<HubListener>();
  const records = new Map<number, LayerRecord>();
  const alerts = new Map<string, AlertEvent>();
  const acknowledged = new Set<string>();
  const log: LogEntry[] = [];
  let seq = 0;
  let traceLayer: number | null = null;
  const tracePoints = new BoundedHistory<[number, number, number]>(maxTrace);
  const ratePoints = new BoundedHistory<[number, number, number, number]>(maxRate);
  let approachingLayer: number | null = null;
  let statusKey = '';
  let snapshotPending = false;
  let capture: RunEvent[] | null = null;
  let initialPlan: RunPlan | undefined;
  let outcome: { count: number; view: OutcomeView | null } | null = null;
  const optical = new Decimator(pointsPerS, 2);
  const crystal = new Decimator(pointsPerS, 3);

  const emit = (message: HubMessage): void => {
    for (const listener of listeners) {
      try {
        listener(message);
      } catch {
        listeners.delete(listener);
      }
    }
  };

  const layerRecipe = (s: ControllerState): LayerRecipe | undefined => recipe.layers[s.index];
  const layerPlan = (s: ControllerState): LayerPlan | undefined => s.plan.layers[s.index - (s.plan.fromLayer - 1)];
  const started = (s: ControllerState | undefined): s is ControllerState => s !== undefined && s.phase !== 'ready';

  const crystalFresh = (s: ControllerState, timeS: number): boolean => Number.isFinite(s.crystal.partNm) && timeS - s.crystal.lastS < CRYSTAL_STALE_S;

  /** The current layer's part thickness at `timeS`, nm, as the crystal (else the clock) reckons it. */
  function partThicknessNm(s: ControllerState, layer: LayerRecipe, timeS: number): number {
    const c = s.crystal;
    if (crystalFresh(s, timeS)) {
      const growing = isGrowing(s);
      const rate = Number.isFinite(c.rateNmPerS) ? c.rateNmPerS : layer.rateNmPerS;
      return c.partNm + (growing ? rate * Math.max(0, timeS - c.lastS) : 0);
    }
    const elapsed = Math.max(0, (s.phase === 'closing' ? Math.min(timeS, s.cutAtS + layer.shutterDelayS) : timeS) - s.openedAtS);
    return Number.isFinite(elapsed) ? layer.rateNmPerS * elapsed : Number.NaN;
  }

  function onReading(r: Reading): void {
    const s = run?.state;
    if (!started(s)) return;
    const layer = layerRecipe(s);
    if (!layer) return;
    if (r.channel === 'optical') {
      const chipNm = partThicknessNm(s, layer, r.timeS) * layer.chipRatio;
      const point = optical.push(r.timeS, [r.value, chipNm], layer.number);
      if (point) emitOptical(point);
    } else if (s.phase === 'depositing') {
      // The rate means something against its band only while the source shutter is open.
      const point = crystal.push(r.timeS, [s.crystal.rateNmPerS, s.crystal.partNm, r.value], layer.number);
      if (point) emitCrystal(point);
    }
  }

  function emitOptical(p: DecimatedPoint): void {
    const [signal, chipNm] = p.values as [number, number];
    if (!Number.isFinite(signal) || !Number.isFinite(chipNm)) return;
    const point: [number, number, number] = [round(p.timeS, 3), round(signal, 6), round(chipNm, 3)];
    if (traceLayer === p.group) tracePoints.push(point);
    emit({ type: 'optical', layer: p.group, point });
  }

  function emitCrystal(p: DecimatedPoint): void {
    const [rate, partNm, frequencyHz] = p.values as [number, number, number];
    const layer = recipe.layers[p.group - 1];
    if (!layer || !Number.isFinite(rate)) return;
    const band = layer.rateNmPerS * (layer.rateBandPercent / 100);
    const point: [number, number, number, number] = [round(p.timeS, 3), round(rate, 5), round(layer.rateNmPerS - band, 5), round(layer.rateNmPerS + band, 5)];
    ratePoints.push(point);
    emit({
      type: 'crystal',
      point,
      partNm: finite(partNm),
      frequencyHz: finite(frequencyHz),
      lifeUsed: finite(crystalLifeUsed(f0, frequencyHz, recipe.crystal.minUsableFrequencyHz)),
    });
  }

  function flushDecimators(): void {
    const o = optical.flush();
    if (o) emitOptical(o);
    const c = crystal.flush();
    if (c) emitCrystal(c);
  }

  function onEvent(event: RunEvent): void {
    if (event.type === 'layer-finished' || event.type === 'run-finished') flushDecimators();
    switch (event.type) {
      case 'layer-started':
        records.set(event.layer, { cut: event.cut, reason: null, estimatedNm: null, firstNm: null, skipped: false });
        traceLayer = event.layer;
        tracePoints.clear();
        break;
      case 'mode-changed': {
        const r = records.get(event.layer);
        if (r) r.cut = event.to;
        break;
      }
      case 'approaching-cut':
        approachingLayer = event.layer;
        break;
      case 'cut': {
        const r = records.get(event.layer);
        if (r) {
          r.reason = event.reason;
          r.estimatedNm = event.estimatedNm;
        }
        break;
      }
      case 'layer-finished': {
        const r = records.get(event.layer);
        if (r) {
          r.estimatedNm = event.estimatedNm;
          r.firstNm = event.estimatedNm;
          r.skipped = event.skipped;
        }
        break;
      }
      case 'alert':
        alerts.set(event.id, event);
        break;
      case 'alert-acknowledged':
        acknowledged.add(event.id);
        break;
      default:
        break;
    }
    seq++;
    log.push({ seq, event });
    if (log.length > maxLog) log.splice(0, log.length - maxLog);
    capture?.push(event);
    emit({ type: 'event', seq, event });
    const status = buildStatus();
    const key = `${status.phase}|${status.layer}|${status.cut}|${status.approaching}|${run?.state.openAlerts.join(',') ?? ''}|${alerts.size}`;
    if (key !== statusKey) {
      statusKey = key;
      emit({ type: 'status', status });
    }
    if (SNAPSHOT_EVENTS.has(event.type) && !snapshotPending) {
      snapshotPending = true;
      queueMicrotask(() => {
        snapshotPending = false;
        emit({ type: 'snapshot', snapshot: buildSnapshot() });
      });
    }
  }

  function alertView(a: AlertEvent, open: boolean): AlertView {
    return { id: a.id, severity: a.severity, code: a.code, message: a.message, layer: a.layer, timeS: a.timeS, open };
  }

  function openAlerts(s: ControllerState | undefined): AlertView[] {
    if (!s) return [];
    const out: AlertView[] = [];
    for (const id of s.openAlerts) {
      const a = alerts.get(id);
      if (a && !acknowledged.has(id)) out.push(alertView(a, true));
    }
    return out;
  }

  function buildStatus(): RunStatus {
    const s = run?.state;
    const open = openAlerts(s);
    let worst: AlertView | null = null;
    for (const a of open) if (!worst || SEVERITY_RANK[a.severity] >= SEVERITY_RANK[worst.severity]) worst = a;
    const base = {
      running: run?.running ?? false,
      layers: recipe.layers.length,
      openAlerts: open.length,
      worstAlert: worst,
    };
    if (!started(s)) {
      return {
        ...base,
        phase: 'ready',
        nowS: Math.max(0, run?.nowS ?? 0),
        layer: null,
        material: null,
        cut: null,
        cutBy: null,
        targetNm: null,
        thicknessNm: null,
        plusMinusNm: null,
        estimateSource: null,
        layerElapsedS: null,
        timeToCutS: null,
        approaching: false,
      };
    }
    const layer = layerRecipe(s) as LayerRecipe;
    const plan = layerPlan(s);
    const nowS = Math.max(s.nowS, run?.nowS ?? s.nowS);
    const fitted = isGrowing(s) ? liveFitEstimate(recipe, s, nowS) : null;
    const thickness = fitted ? fitted.thicknessNm : partThicknessNm(s, layer, nowS);
    let timeToCutS: number | null = null;
    if (s.phase === 'depositing') {
      const rate = Number.isFinite(s.crystal.rateNmPerS) && s.crystal.rateNmPerS > 0 ? s.crystal.rateNmPerS : layer.rateNmPerS;
      timeToCutS = Math.max(0, (layer.targetNm - thickness) / rate - layer.shutterDelayS);
    } else if (s.phase === 'closing') timeToCutS = 0;
    const ended = s.phase === 'finished' || s.phase === 'aborted';
    return {
      ...base,
      phase: s.phase,
      nowS,
      layer: layer.number,
      material: layer.materialName,
      cut: s.mode,
      cutBy: ended ? null : currentRule(s),
      targetNm: layer.targetNm,
      thicknessNm: finite(ended ? (s.achievedNm[s.index] ?? thickness) : thickness),
      plusMinusNm: finite(fitted && !ended ? fitted.sigmaNm : (plan?.precisionNm ?? Number.NaN)),
      estimateSource: fitted && !ended ? 'fit' : crystalFresh(s, nowS) ? 'crystal' : 'clock',
      layerElapsedS: finite(nowS - s.openedAtS),
      timeToCutS: finite(timeToCutS ?? Number.NaN),
      approaching: approachingLayer === layer.number && s.phase === 'depositing',
    };
  }

  /** The rule cutting the layer in progress, as the controller decides it: the fit while it runs on an optical layer. */
  function currentRule(s: ControllerState): CutReason {
    const material = recipe.layers[s.index]?.materialName ?? '';
    return cutRuleFor(s.mode, s.fit ? 'fit' : 'plain', estimator === 'fit' && s.materialRate[material] !== undefined);
  }

  function buildRows(s: ControllerState | undefined): StackRow[] {
    const known = s ? resolvedStack(recipe, s) : null;
    return recipe.layers.map((layer, i): StackRow => {
      const record = records.get(layer.number);
      const planned = s ? s.plan.layers[i - (s.plan.fromLayer - 1)] : undefined;
      let status: StackRow['status'] = 'future';
      if (started(s)) {
        if (i < s.index || (i === s.index && s.phase === 'finished')) status = 'past';
        else if (i === s.index) status = 'current';
      }
      // The finished layers as the run knows them now (chip refits revise them), else the cut's figure.
      const estimate = known?.partNm[i] ?? record?.estimatedNm ?? null;
      const estimatedNm = estimate === null ? null : finite(estimate);
      const firstNm = record?.firstNm ?? null;
      const cut = record?.cut ?? planned?.cut ?? (layer.cutSetting === 'auto' ? 'level' : layer.cutSetting);
      const live = started(s) && i === s.index && status === 'current' && isGrowing(s);
      return {
        number: layer.number,
        material: layer.materialName,
        targetNm: layer.targetNm,
        cut,
        cutRule: record?.reason ?? (live ? currentRule(s) : cutRuleFor(cut, estimator, estimator === 'fit' && s?.materialRate[layer.materialName] !== undefined)),
        status,
        chip: recipe.chips[layer.chip]?.label ?? '',
        wavelengthNm: layer.wavelengthNm,
        cutReason: record?.reason ?? null,
        skipped: record?.skipped ?? false,
        estimatedNm,
        firstEstimatedNm: firstNm === null ? null : finite(firstNm),
        // Shown to 0.01 nm: a change the table would show is a revision.
        revised: estimatedNm !== null && firstNm !== null && Number.isFinite(firstNm) && Math.abs(estimatedNm - firstNm) >= 0.005,
        indexFactor: finite(known?.indexFactors[i] ?? Number.NaN),
        errorNm: estimatedNm === null ? null : round(estimatedNm - layer.targetNm, 4),
        errorPercent: estimatedNm === null ? null : round((100 * (estimatedNm - layer.targetNm)) / layer.targetNm, 4),
      };
    });
  }

  function buildTrace(s: ControllerState | undefined): TraceView | null {
    if (!started(s)) return null;
    const layer = layerRecipe(s);
    const plan = layerPlan(s);
    if (!layer || !plan) return null;
    return {
      layer: layer.number,
      material: layer.materialName,
      cut: s.mode,
      wavelengthNm: plan.wavelengthNm,
      signal: plan.signal,
      chip: plan.chip,
      openedAtS: finite(s.openedAtS),
      chipRateNmPerS: layer.rateNmPerS * layer.chipRatio,
      chipRatio: layer.chipRatio,
      chipTargetNm: plan.chipTargetNm,
      targetNm: plan.targetNm,
      stepNm: plan.curve.stepNm,
      predicted: plan.curve.signal.map((v) => round(v, 6)),
      triggerSignal: s.mode === 'level' ? plan.triggerSignal : null,
      turningPoints: plan.turningPoints.map((tp) => ({ thicknessNm: tp.thicknessNm, signal: tp.signal, kind: tp.kind })),
      precisionNm: plan.precisionNm,
      points: traceLayer === layer.number ? tracePoints.values() : [],
    };
  }

  function buildCrystal(s: ControllerState | undefined): CrystalView {
    const layer = s ? layerRecipe(s) : undefined;
    const f = s?.crystal.frequencyHz ?? Number.NaN;
    return {
      points: ratePoints.values(),
      frequencyHz: finite(f),
      partNm: finite(s?.crystal.partNm ?? Number.NaN),
      rateNmPerS: finite(s?.crystal.rateNmPerS ?? Number.NaN),
      plannedRateNmPerS: layer?.rateNmPerS ?? null,
      rateBandPercent: layer?.rateBandPercent ?? null,
      lifeUsed: finite(crystalLifeUsed(f0, f, recipe.crystal.minUsableFrequencyHz)),
    };
  }

  function buildOutcome(s: ControllerState | undefined): OutcomeView | null {
    const finished = s ? finishedLayers(s) : 0;
    if (outcome?.count !== finished) {
      let view: OutcomeView | null;
      try {
        const known = s ? resolvedStack(recipe, s) : { partNm: [], indexFactors: [] };
        view = outcomeSpectrum(recipe, { partNm: known.partNm.slice(0, finished), indexFactors: known.indexFactors.slice(0, finished) });
      } catch {
        // A stack the optics cannot evaluate (a material without data in the band) has no outcome panel.
        view = null;
      }
      outcome = { count: finished, view };
    }
    return outcome.view;
  }

  function buildSnapshot(): RunSnapshot {
    const s = run?.state;
    return {
      version: VIEW_FORMAT_VERSION,
      source: options.source,
      runId: options.runId ?? null,
      speed: options.speed ?? null,
      estimator,
      recipe: recipe.name,
      commandsAccepted: acceptCommands && run !== undefined,
      status: buildStatus(),
      layers: buildRows(s),
      trace: buildTrace(s),
      crystal: buildCrystal(s),
      alerts: openAlerts(s),
      log: log.slice(-200),
      outcome: buildOutcome(s),
    };
  }

  function command(action: OperatorAction, alertId?: string): CommandOutcome {
    if (!acceptCommands) return { applied: false, action, timeS: null, reason: 'this view is a replay; commands go to the live run only' };
    if (!run) return { applied: false, action, timeS: null, reason: 'no run is attached yet' };
    const before = run.state;
    const timeS = Math.max(run.nowS, Number.isFinite(before.nowS) ? before.nowS : 0);
    const input: OperatorCommand = alertId === undefined ? { kind: 'operator', action, timeS } : { kind: 'operator', action, alertId, timeS };
    const events: RunEvent[] = [];
    capture = events;
    try {
      run.apply(input);
    } finally {
      capture = null;
    }
    if (events.length > 0) return { applied: true, action, timeS, events };
    return { applied: false, action, timeS, reason: refusal(action, before, alertId) };
  }

  return {
    recipe,
    source: options.source,
    runId: options.runId ?? null,
    speed: options.speed ?? null,
    feed: {
      input(input) {
        if (input.kind === 'reading') onReading(input);
      },
      event: onEvent,
    },
    attach(r) {
      run = r;
    },
    snapshot: buildSnapshot,
    status: buildStatus,
    subscribe(listener) {
      listeners.add(listener);
      return () => {
        listeners.delete(listener);
      };
    },
    command,
    planNow() {
      if (run) return run.state.plan;
      initialPlan ??= planRun(recipe, { suggest: 'none' });
      return initialPlan;
    },
    alertHistory() {
      const open = new Set(openAlerts(run?.state).map((a) => a.id));
      return [...alerts.values()].map((a) => alertView(a, open.has(a.id)));
    },
  };
}

/** Layers whose estimate is final: the finished ones (the current one once the run ended). */
function finishedLayers(s: ControllerState): number {
  if (s.phase === 'finished' || s.phase === 'awaiting-close') return s.achievedNm.length;
  return Math.min(s.index, s.achievedNm.length);
}

const PHASE_WORDS: Record<ControllerState['phase'], string> = {
  ready: 'not started',
  depositing: 'depositing',
  closing: 'closing the shutter',
  holding: 'on hold',
  'awaiting-close': 'waiting for a shutter to close',
  finished: 'finished',
  aborted: 'aborted',
};

/** Why the controller did nothing with a command, in words an operator can act on. */
function refusal(action: OperatorAction, s: ControllerState, alertId: string | undefined): string {
  const phase = PHASE_WORDS[s.phase];
  switch (action) {
    case 'start':
      return `the run has already started (it is ${phase})`;
    case 'hold':
      return `only a layer being deposited can be held; the run is ${phase}`;
    case 'resume':
      return `only a run on hold or waiting for a shutter to close can be resumed; the run is ${phase}`;
    case 'cut-now':
    case 'skip-layer':
      return `no layer is being deposited; the run is ${phase}`;
    case 'abort':
      return `the run has already ended (${phase})`;
    case 'acknowledge':
      return alertId === undefined ? 'acknowledge needs the alert’s id' : `alert ${alertId} is not open`;
  }
}

function finite(x: number): number | null {
  return Number.isFinite(x) ? x : null;
}

function round(x: number, digits: number): number {
  const f = 10 ** digits;
  return Math.round(x * f) / f;
}
