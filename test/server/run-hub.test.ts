// The run hub over a stepped run on the virtual chamber: what the dashboard is shown (stack
// table, trace, crystal, outcome), the feed to subscribers (every event, decimated readings,
// status changes, coalesced snapshots) and operator commands.
import { describe, expect, it } from 'vitest';
import { BoundedHistory } from '../../src/server/bounded-history.ts';
import { Decimator } from '../../src/server/decimator.ts';
import { liveFitEstimate } from '../../src/pipeline/controller.ts';
import { createRunHub } from '../../src/server/run-hub.ts';
import type { HubMessage, RunSnapshot } from '../../src/server/views.ts';
import { ar4, manualRun, settle, typical, withOpticalRate } from './support.ts';

const byType = <T extends HubMessage['type']>(messages: readonly HubMessage[], type: T): Extract<HubMessage, { type: T }>[] =>
  messages.filter((m): m is Extract<HubMessage, { type: T }> => m.type === type);

/** Every number in a value, with its path. */
function numbers(value: unknown, path = ''): [string, number][] {
  if (typeof value === 'number') return [[path, value]];
  if (Array.isArray(value)) return value.flatMap((v, i) => numbers(v, `${path}[${i}]`));
  if (value !== null && typeof value === 'object') return Object.entries(value).flatMap(([k, v]) => numbers(v, `${path}.${k}`));
  return [];
}

describe('Decimator', () => {
  it('gives at most the set number of points per second of run time, each the mean of its bucket', () => {
    const d = new Decimator(30, 1);
    const points = [];
    // 1 kHz for 3 s of a ramp: value = time.
    for (let i = 0; i < 3000; i++) {
      const t = i / 1000;
      const p = d.push(t, [t], 1);
      if (p) points.push(p);
    }
    const last = d.flush();
    if (last) points.push(last);
    expect(points).toHaveLength(90);
    for (const p of points) {
      expect(p.count).toBeGreaterThanOrEqual(33);
      expect(p.count).toBeLessThanOrEqual(34);
      // The mean of a ramp is its value at the mean time.
      expect(p.values[0]).toBeCloseTo(p.timeS, 12);
    }
  });

  it('passes every reading at or below the rate, and never merges across a group change', () => {
    const d = new Decimator(30, 2);
    const out = [];
    for (let i = 0; i < 50; i++) {
      const p = d.push(i / 10, [i, -i], i < 25 ? 1 : 2);
      if (p) out.push(p);
    }
    out.push(d.flush());
    expect(out).toHaveLength(50);
    expect(out.every((p) => p?.count === 1)).toBe(true);
    expect(out[24]?.group).toBe(1);
    expect(out[25]?.group).toBe(2);
    expect(out[49]?.values).toEqual([49, -49]);
  });

  it('refuses a rate that is not a positive number', () => {
    expect(() => new Decimator(0, 1)).toThrow(/pointsPerS/);
    expect(() => new Decimator(Number.NaN, 1)).toThrow(/pointsPerS/);
    expect(() => new Decimator(30, 0)).toThrow(/width/);
  });
});

describe('BoundedHistory', () => {
  it('stays within its bound at an even density over the whole span, the newest point kept', () => {
    const h = new BoundedHistory<number>(100);
    for (let i = 0; i < 10_000; i++) h.push(i);
    const values = h.values();
    expect(values.length).toBeLessThanOrEqual(101);
    expect(values.length).toBeGreaterThanOrEqual(50);
    expect(values.at(-1)).toBe(9999);
    // Even density: each tenth of the span holds about a tenth of the points.
    const counts = new Array<number>(10).fill(0);
    for (const v of values.slice(0, -1)) counts[Math.floor(v / 1000)] = (counts[Math.floor(v / 1000)] ?? 0) + 1;
    const mean = (values.length - 1) / 10;
    for (const c of counts) expect(Math.abs(c - mean)).toBeLessThanOrEqual(0.25 * mean);
    h.clear();
    expect(h.values()).toEqual([]);
  });
});

describe('the run hub', () => {
  it('shows the stack, the current layer’s trace, the crystal and the outcome as the run goes', async () => {
    const { hub, run, events } = manualRun(ar4);
    const start: RunSnapshot = hub.snapshot();
    expect(start.status.phase).toBe('depositing');
    expect(start.status.layer).toBe(1);
    expect(start.layers.map((r) => r.status)).toEqual(['current', 'future', 'future', 'future']);
    // Nothing finished: the deposited stack is the design.
    expect(start.outcome?.deposited.R).toEqual(start.outcome?.design.R);
    expect(start.outcome?.preferred).toBe('R'); // an antireflection coating

    run.runUntil(120);
    await settle();
    const finished = events.filter((e) => e.type === 'layer-finished');
    expect(finished.length).toBeGreaterThanOrEqual(1);
    const s = hub.snapshot();
    const layer1 = s.layers[0];
    const cut1 = events.find((e) => e.type === 'cut' && e.layer === 1);
    if (!layer1 || cut1?.type !== 'cut') throw new Error('layer 1 was not cut');
    expect(layer1.status).toBe('past');
    expect(layer1.cutReason).toBe(cut1.reason);
    expect(layer1.estimatedNm).toBe(run.state.achievedNm[0]);
    expect(layer1.errorNm).toBeCloseTo((layer1.estimatedNm ?? Number.NaN) - layer1.targetNm, 3);
    expect(layer1.errorPercent).toBeCloseTo((100 * (layer1.errorNm ?? Number.NaN)) / layer1.targetNm, 3);

    const current = s.layers.find((r) => r.status === 'current');
    expect(current?.number).toBe(run.state.index + 1);
    expect(s.status.layer).toBe(current?.number);
    const trace = s.trace;
    if (!trace) throw new Error('no trace');
    const plan = run.state.plan.layers[run.state.index - (run.state.plan.fromLayer - 1)];
    expect(trace.layer).toBe(current?.number);
    expect(trace.predicted).toHaveLength(plan?.curve.signal.length ?? -1);
    expect(trace.chipTargetNm).toBe(plan?.chipTargetNm);
    expect(trace.points.length).toBeGreaterThan(10);
    // Every point belongs to this layer: after its shutter opened, thickness growing from about zero.
    expect(trace.points.every((p) => p[0] >= (trace.openedAtS ?? Number.NaN))).toBe(true);
    const first = trace.points[0];
    const last = trace.points[trace.points.length - 1];
    if (!first || !last) throw new Error('no points');
    expect(first[2]).toBeLessThan(0.2 * trace.chipTargetNm);
    expect(last[2]).toBeGreaterThan(first[2]);

    expect(s.crystal.points.length).toBeGreaterThan(10);
    expect(s.crystal.frequencyHz).toBe(run.state.crystal.frequencyHz);
    expect(s.crystal.lifeUsed).toBeGreaterThan(0);
    for (const [, rate, lo, hi] of s.crystal.points) {
      expect(lo).toBeLessThan(hi);
      expect(rate).toBeGreaterThan(0);
    }

    const outcome = s.outcome;
    if (!outcome) throw new Error('no outcome');
    expect(outcome.layersEstimated).toBe(finished.length);
    // The largest difference reported is the largest difference of the arrays shown.
    const diffs = outcome.design.R.map((r, i) => Math.abs(r - (outcome.deposited.R[i] ?? Number.NaN)));
    expect(outcome.maxAbsR).toBeCloseTo(Math.max(...diffs), 12);
    expect(outcome.maxAbsR).toBeGreaterThan(0); // layer 1 did not land exactly on its target

    // JSON has no NaN: every number outside the log (raw events) is finite.
    const views = Object.fromEntries(Object.entries(s).filter(([key]) => key !== 'log'));
    for (const [path, n] of numbers(views)) expect(Number.isFinite(n), path).toBe(true);
  });

  it('with the model fit, the readout is the fit’s thickness and rms; with the plain rules, the crystal’s and the plan’s', async () => {
    // 150 s into the run a layer is growing under the fit (cut by it, or watched by it on the crystal).
    const fitted = manualRun(ar4, { estimator: 'fit' });
    fitted.run.runUntil(150);
    await settle();
    const s = fitted.hub.snapshot().status;
    const state = fitted.run.state;
    expect(state.fit).not.toBeNull();
    expect(s.estimateSource).toBe('fit');
    const est = state.fit?.fit.estimate(0);
    expect(est?.readings).toBeGreaterThan(8);
    // The readout is the fit's thickness now and its own rms, in part nm.
    const layer = ar4.layers[state.index];
    const live = liveFitEstimate(ar4, state, Math.max(state.nowS, fitted.run.nowS));
    expect(s.thicknessNm).toBeCloseTo(live?.thicknessNm ?? Number.NaN, 3);
    expect(s.plusMinusNm).toBeCloseTo(live?.sigmaNm ?? Number.NaN, 3);
    expect(s.plusMinusNm).toBeGreaterThan(0);
    expect(s.plusMinusNm).toBeLessThan(0.05 * (layer?.targetNm ?? 0));
    // The fit's thickness and the crystal's agree to the index and rate differences (a few per cent).
    expect(Math.abs((s.thicknessNm ?? Number.NaN) / state.crystal.partNm - 1)).toBeLessThan(0.05);
    const plain = manualRun(ar4, { estimator: 'plain' });
    plain.run.runUntil(150);
    await settle();
    const p = plain.hub.snapshot().status;
    expect(p.estimateSource).toBe('crystal');
    const plan = plain.run.state.plan.layers[plain.run.state.index - (plain.run.state.plan.fromLayer - 1)];
    expect(p.plusMinusNm).toBeCloseTo(plan?.precisionNm ?? Number.NaN, 3);
  });

  it('forwards every event in order, decimated readings, status changes and one snapshot per burst', async () => {
    const { hub, run, events } = manualRun(ar4);
    const messages: HubMessage[] = [];
    const unsubscribe = hub.subscribe((m) => messages.push(m));
    const before = events.length;
    run.runUntil(200);
    await settle();
    unsubscribe();
    const forwarded = byType(messages, 'event');
    expect(forwarded.map((m) => m.event)).toEqual(events.slice(before));
    // Sequence numbers count every event: none thinned.
    forwarded.forEach((m, i) => expect(m.seq).toBe((forwarded[0]?.seq ?? 0) + i));
    const statuses = byType(messages, 'status');
    expect(statuses.some((m) => m.status.layer === 2)).toBe(true);
    // One snapshot after each burst of layer events, not one per event.
    const snapshots = byType(messages, 'snapshot');
    const layerEvents = forwarded.filter((m) => ['layer-started', 'layer-finished', 'replanned'].includes(m.event.type));
    expect(snapshots.length).toBeGreaterThanOrEqual(1);
    expect(snapshots.length).toBeLessThan(layerEvents.length);
    // A unsubscribed listener hears nothing more.
    const count = messages.length;
    run.runUntil(220);
    expect(messages.length).toBe(count);
  });

  it('decimates a 1 kHz optical monitor to about 30 points per second of run time, the 10 Hz crystal not at all', () => {
    const { hub, run, inputs } = manualRun(ar4, { profile: withOpticalRate(typical, 1000) });
    const messages: HubMessage[] = [];
    hub.subscribe((m) => messages.push(m));
    run.runUntil(12);
    const window = (t: number): boolean => t >= 2 && t < 10;
    const opticalIn = inputs.filter((i) => i.kind === 'reading' && i.channel === 'optical' && window(i.timeS)).length;
    const crystalIn = inputs.filter((i) => i.kind === 'reading' && i.channel === 'crystal' && window(i.timeS)).length;
    const opticalOut = byType(messages, 'optical').filter((m) => window(m.point[0])).length;
    const crystalOut = byType(messages, 'crystal').filter((m) => window(m.point[0])).length;
    expect(opticalIn).toBeGreaterThan(7900); // 1 kHz for 8 s
    expect(opticalOut / 8).toBeGreaterThanOrEqual(29);
    expect(opticalOut / 8).toBeLessThanOrEqual(31);
    expect(crystalOut).toBeGreaterThanOrEqual(crystalIn - 2);
    expect(crystalOut).toBeLessThanOrEqual(crystalIn);
  });

  it('applies operator commands at the run’s time and says why one cannot be taken', () => {
    const { hub, run } = manualRun(ar4);
    run.runUntil(10);
    const hold = hub.command('hold');
    expect(hold.applied).toBe(true);
    if (!hold.applied) throw new Error('hold refused');
    expect(hold.timeS).toBe(run.nowS);
    expect(hold.events.map((e) => e.type)).toEqual(['held', 'shutter']);
    expect(run.state.phase).toBe('holding');
    expect(hub.status().phase).toBe('holding');

    const again = hub.command('hold');
    expect(again.applied).toBe(false);
    if (again.applied) throw new Error('held twice');
    expect(again.reason).toMatch(/on hold/);

    expect(hub.command('resume').applied).toBe(true);
    expect(run.state.phase).toBe('depositing');

    const unknown = hub.command('acknowledge', 'A99');
    expect(unknown.applied).toBe(false);
    if (!unknown.applied) expect(unknown.reason).toBe('alert A99 is not open');

    const cut = hub.command('cut-now');
    if (!cut.applied) throw new Error('cut refused');
    const alert = cut.events.find((e) => e.type === 'alert');
    expect(cut.events.find((e) => e.type === 'cut')).toMatchObject({ reason: 'operator', layer: 1 });
    if (alert?.type !== 'alert') throw new Error('no operator alert');
    expect(hub.status().worstAlert?.id).toBe(alert.id);
    expect(hub.command('acknowledge', alert.id).applied).toBe(true);
    expect(hub.status().openAlerts).toBe(0);
    expect(hub.alertHistory().find((a) => a.id === alert.id)?.open).toBe(false);
  });

  it('takes no commands for a replay, nor before a run is attached', () => {
    const replay = createRunHub({ recipe: ar4, source: 'replay' });
    expect(replay.command('abort')).toMatchObject({ applied: false, reason: expect.stringMatching(/replay/) as unknown });
    const idle = createRunHub({ recipe: ar4, source: 'live' });
    expect(idle.command('abort')).toMatchObject({ applied: false, reason: 'no run is attached yet' });
    expect(idle.snapshot().commandsAccepted).toBe(false);
    expect(idle.snapshot().status.phase).toBe('ready');
    expect(idle.planNow().layers).toHaveLength(ar4.layers.length);
  });

  it('drops a listener that throws and keeps serving the others', () => {
    const { hub, run } = manualRun(ar4);
    let good = 0;
    hub.subscribe(() => {
      throw new Error('broken viewer');
    });
    hub.subscribe(() => good++);
    expect(() => run.runUntil(5)).not.toThrow();
    expect(good).toBeGreaterThan(0);
  });
});
