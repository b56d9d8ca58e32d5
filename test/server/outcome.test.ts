// The outcome panel against the simulator's truth: the spectrum of the stack as the fits know it
// (their optical thicknesses and indices) must be the spectrum of the stack the chamber really
// deposited, to within what the fits' errors allow; read with the design's indices it was not.
import { describe, expect, it } from 'vitest';
import { createVirtualChamber, trueStackSpec } from '../../sim/index.ts';
import { spectrumDeviation } from '../../src/model/design/spectrum-deviation.ts';
import { createController } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { resolvedStack } from '../../src/pipeline/resolved-stack.ts';
import { createSteppedRun } from '../../src/pipeline/run-stepped.ts';
import { createRunHub } from '../../src/server/run-hub.ts';
import { edge, settle, typical } from './support.ts';

describe('outcome spectrum', () => {
  it('is the true stack’s spectrum to within the fits’ errors, on the demo’s edge filter (seed 1)', async () => {
    const chamber = createVirtualChamber(edge, typical, 1);
    const hub = createRunHub({ recipe: edge, source: 'simulated', runId: 'outcome', speed: null });
    const finished: Extract<RunEvent, { type: 'layer-finished' }>[] = [];
    const run = createSteppedRun(createController(edge, { estimator: 'fit' }), chamber, {
      onInput: (input) => hub.feed.input(input),
      onEvent: (event) => {
        hub.feed.event(event);
        if (event.type === 'layer-finished') {
          finished.push(event);
          // The shared rule gives, at each layer's end, the figures the controller reported.
          const resolved = resolvedStack(edge, run.state);
          expect(resolved.partNm[event.layer - 1], `layer ${event.layer}`).toBeCloseTo(event.estimatedNm, 9);
          expect(resolved.indexFactors[event.layer - 1], `layer ${event.layer}`).toBeCloseTo(event.indexFactor, 9);
        }
      },
    });
    hub.attach(run);
    run.runUntil(Number.POSITIVE_INFINITY);
    await settle();
    expect(run.state.phase).toBe('finished');
    expect(finished).toHaveLength(edge.layers.length);

    const outcome = hub.snapshot().outcome;
    if (!outcome) throw new Error('no outcome');
    expect(outcome.layersEstimated).toBe(edge.layers.length);
    const stepNm = outcome.wavelengthsNm[1]! - outcome.wavelengthsNm[0]!;
    const truth = spectrumDeviation(edge.design.stack, trueStackSpec(edge, chamber.truth()), { fromNm: outcome.fromNm, toNm: outcome.toNm }, { stepNm });
    // `fringe simulate … --seed 1` reports the true stack within 3.32 pp of the design (T max);
    // the panel's figure must tell the same story, not a tenfold one.
    expect(truth.maxAbsT).toBeLessThan(0.05);
    expect(Math.abs(outcome.maxAbsT - truth.maxAbsT)).toBeLessThan(0.015);
    // Point by point the estimated spectrum is the true one: the fits' optical thicknesses are
    // good to about 0.1 % (DEVELOPERS.md, the chip refit), and an edge's slope turns that into
    // a point or two of T at most.
    let worst = 0;
    outcome.deposited.T.forEach((t, i) => {
      worst = Math.max(worst, Math.abs(t - truth.deposited.T[i]!));
    });
    expect(worst).toBeLessThan(0.02);
  }, 120000);
});
