// The controller against lines that are well formed but wrong (issue 17, found by driving a run
// through a relay that corrupts, delays and injects lines): a wild crystal frequency, a
// timestamp far ahead, a fresh crystal mid-layer, an instrument clock that restarts, a short
// monitor gap, and a flood of bad lines.
import { fileURLToPath } from 'node:url';
import fc from 'fast-check';
import { describe, expect, it } from 'vitest';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { createController, type Controller, type ControllerOptions } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import type { PipelineInput, Reading } from '../../src/pipeline/types.ts';
import { runIdeal, type IdealRunOptions, type IdealRunResult } from '../support/ideal-chamber.ts';

const recipeFile = (name: string): string => fileURLToPath(new URL(`../../config/recipes/${name}`, import.meta.url));
const ar4 = loadRecipe(recipeFile('ar4-visible.yaml'));
const edge = loadRecipe(recipeFile('edge-longpass-visible.yaml'));
const mirror = loadRecipe(recipeFile('mirror-1064.yaml'));

const ofType = <T extends RunEvent['type']>(events: readonly RunEvent[], type: T): Extract<RunEvent, { type: T }>[] =>
  events.filter((e): e is Extract<RunEvent, { type: T }> => e.type === type);

/** The controller with its inputs passed through `tamper` first: a relay between the instruments and fringe. */
function behind(controller: Controller, tamper: (input: PipelineInput) => PipelineInput): Controller {
  return { ...controller, step: (s, input) => controller.step(s, tamper(input)) };
}

/** Replaces the first reading of `channel` at or after `atS` by `wrong(reading)`; every other input passes. */
function once(channel: Reading['channel'], atS: number, wrong: (r: Reading) => Reading): (input: PipelineInput) => PipelineInput {
  let done = false;
  return (input) => {
    if (done || input.kind !== 'reading' || input.channel !== channel || input.timeS < atS) return input;
    done = true;
    return wrong(input);
  };
}

const runs = new Map<string, IdealRunResult>();
/** An undisturbed run, kept: the reference every disturbed run is held to. */
function baseline(recipe: ResolvedRecipe, options: Partial<ControllerOptions>, run: IdealRunOptions = {}): IdealRunResult {
  const key = JSON.stringify([recipe.name, options, run]);
  let result = runs.get(key);
  if (!result) {
    result = runIdeal(recipe, createController(recipe, options), run);
    runs.set(key, result);
  }
  return result;
}

const startOf = (run: IdealRunResult, layer: number): number => ofType(run.events, 'layer-started').find((e) => e.layer === layer)?.timeS ?? Number.NaN;
const reasons = (run: IdealRunResult): string[] => ofType(run.events, 'cut').map((c) => c.reason);
const alertCodes = (run: IdealRunResult): string[] => ofType(run.events, 'alert').map((a) => a.code);

/** Every layer within `toleranceNm` of the undisturbed run, cut for the same reason. */
function expectSameCuts(run: IdealRunResult, reference: IdealRunResult, toleranceNm: number): void {
  expect(reasons(run)).toEqual(reasons(reference));
  reference.trueNm.forEach((nm, i) => expect(Math.abs((run.trueNm[i] as number) - nm), `layer ${i + 1}`).toBeLessThan(toleranceNm));
  expect(ofType(run.events, 'run-finished')[0]?.outcome).toBe('complete');
}

// One reading's growth on ar4's layers (0.4 nm/s at 10 Hz), nm.
const READING_NM = 0.04;
// Implausible readings in a row that are the instrument's, not a line's (controller.ts).
const SUSPECTS = 5;

describe('one plausible wrong line', () => {
  for (const estimator of ['plain', 'fit'] as const) {
    it(`a crystal line of 5,990,000 Hz at 4.6 nm of layer 3's 112 nm is not used (${estimator})`, () => {
      // ar4 layer 3 starts near 5,998,960 Hz (plan): 5,990,000 Hz read as this layer's film is
      // hundreds of nanometres, past the 1.3× thickness ceiling.
      const reference = baseline(ar4, { estimator });
      const atS = startOf(reference, 3) + 4.6 / 0.4;
      const controller = behind(createController(ar4, { estimator }), once('crystal', atS, (r) => ({ ...r, value: 5_990_000 })));
      const run = runIdeal(ar4, controller);
      expect(alertCodes(run)).not.toContain('thickness-ceiling');
      expect(run.state.faults['implausible-jump']).toBe(1);
      expect(alertCodes(run)).toContain('fault-implausible-jump');
      expectSameCuts(run, reference, READING_NM);
    });
  }

  it('a crystal line 9,000 s ahead is not used and does not move the run clock', () => {
    const reference = baseline(ar4, {});
    const atS = startOf(reference, 3) + 0.21 * 281;
    let seen = Number.NaN;
    const controller = behind(createController(ar4), once('crystal', atS, (r) => ((seen = r.timeS), { ...r, timeS: r.timeS + 9000, arrivalS: r.timeS + 9000 })));
    let after = Number.NaN;
    const watching: Controller = {
      ...controller,
      step: (s, input) => {
        const result = controller.step(s, input);
        if (Number.isFinite(seen) && Number.isNaN(after)) after = result.state.nowS;
        return result;
      },
    };
    const run = runIdeal(ar4, watching);
    expect(after).toBeLessThan(seen + 1);
    expect(run.state.faults['time-jump']).toBe(1);
    expect(alertCodes(run)).toContain('fault-time-jump');
    expect(alertCodes(run)).not.toContain('time-ceiling');
    expect(Math.abs(run.state.nowS - reference.state.nowS)).toBeLessThan(1);
    expectSameCuts(run, reference, READING_NM);
  });

  it('an optical line far outside anything the layer can show is not used', () => {
    const reference = baseline(ar4, {});
    const atS = startOf(reference, 3) + 100;
    const run = runIdeal(ar4, behind(createController(ar4), once('optical', atS, (r) => ({ ...r, value: 57.3 }))));
    expect(run.state.faults['implausible-jump']).toBe(1);
    expectSameCuts(run, reference, READING_NM);
  });

  it('an optical monitor that jumps about erratically is set aside for the layer: the crystal cuts it', () => {
    // ar4 layer 3's planned curve spans 0.735–0.887 at 760 nm (plan): readings alternating 1.45
    // and −0.45 jump by more than twice that from the last and from each other.
    const reference = baseline(ar4, {});
    const fromS = startOf(reference, 3) + 100;
    let k = 0;
    const erratic = (input: PipelineInput): PipelineInput =>
      input.kind === 'reading' && input.channel === 'optical' && input.timeS >= fromS && input.timeS < fromS + 5 ? { ...input, value: k++ % 2 === 0 ? 1.45 : -0.45 } : input;
    const run = runIdeal(ar4, behind(createController(ar4), erratic));
    expect(alertCodes(run)).toContain('optical-implausible');
    expect(alertCodes(run)).toContain('crystal-fallback');
    expect(alertCodes(run)).not.toContain('mode-restored');
    const layer = ar4.layers[2] as ResolvedRecipe['layers'][number];
    expect(ofType(run.events, 'cut').find((c) => c.layer === 3)?.reason).toBe('crystal-thickness');
    expect(Math.abs((run.trueNm[2] as number) - layer.targetNm)).toBeLessThan(2 * READING_NM);
  });

  it('an optical level that steps and stays (a monitor changing range) is taken up after five readings', () => {
    const reference = baseline(ar4, {});
    const fromS = startOf(reference, 3) + 100;
    const stepped = (input: PipelineInput): PipelineInput =>
      input.kind === 'reading' && input.channel === 'optical' && input.timeS >= fromS ? { ...input, value: input.value + 0.35 } : input;
    const run = runIdeal(ar4, behind(createController(ar4), stepped), { maxS: fromS + 10 });
    expect(run.state.faults['implausible-jump']).toBe(SUSPECTS - 1);
    expect(alertCodes(run)).not.toContain('optical-implausible');
    expect(run.state.optical.value).toBeGreaterThan(1);
  });

  it('property: one wild reading anywhere in a run moves no cut by more than a reading’s growth', () => {
    const reference = baseline(ar4, {});
    const endS = reference.state.nowS;
    const wild = fc.oneof(
      // A crystal frequency anywhere a 6 MHz crystal could be read, far from where it is.
      fc.record({ channel: fc.constant('crystal' as const), value: fc.double({ min: 5.5e6, max: 6.05e6, noNaN: true }), aheadS: fc.constant(0) }),
      // A transmittance no chip can have.
      fc.record({ channel: fc.constant('optical' as const), value: fc.oneof(fc.double({ min: -100, max: -0.8, noNaN: true }), fc.double({ min: 2, max: 100, noNaN: true })), aheadS: fc.constant(0) }),
      // A timestamp a bounded step would not reach.
      fc.record({ channel: fc.constantFrom('crystal' as const, 'optical' as const), value: fc.constant(Number.NaN), aheadS: fc.double({ min: 10, max: 1e5, noNaN: true }) }),
    );
    fc.assert(
      fc.property(fc.double({ min: 1, max: endS - 5, noNaN: true }), wild, (atS, w) => {
        const tamper = once(w.channel, atS, (r) => ({
          ...r,
          value: Number.isNaN(w.value) ? r.value : w.value,
          timeS: r.timeS + w.aheadS,
          arrivalS: r.arrivalS + w.aheadS,
        }));
        const run = runIdeal(ar4, behind(createController(ar4), tamper));
        // A crystal value within the noise allowance of the truth is used, and moves a crystal
        // cut by at most what its few hertz mean (a few hundredths of a nanometre here).
        expectSameCuts(run, reference, READING_NM);
      }),
      { numRuns: 12, seed: 17 },
    );
  });
});

describe('a fresh crystal mid-layer', () => {
  for (const estimator of ['plain', 'fit'] as const) {
    it(`is recognised and bridged: the optical layer is armed and cut as planned, the layers after it on target (${estimator})`, () => {
      const reference = baseline(ar4, { estimator });
      const atS = startOf(reference, 3) + 40;
      const run = runIdeal(ar4, createController(ar4, { estimator }), { crystalChange: { atS, bareHz: 5_999_700 } });
      expect(alertCodes(run)).toContain('crystal-changed');
      expect(alertCodes(run)).not.toContain('crystal-lost');
      expectSameCuts(run, reference, 2 * READING_NM);
      // The layer's crystal record is the whole layer: what grew on the old crystal and on the new.
      const finished = ofType(run.events, 'layer-finished').find((e) => e.layer === 3);
      const before = ofType(reference.events, 'layer-finished').find((e) => e.layer === 3);
      expect(Math.abs((finished?.crystalNm ?? 0) - (before?.crystalNm ?? 0))).toBeLessThan(2 * READING_NM);
    });
  }

  it('a crystal-cut layer carries on across the change and is cut within two readings’ growth of its target', () => {
    const layer = edge.layers[0] as ResolvedRecipe['layers'][number];
    const run = runIdeal(edge, createController(edge, { replan: false }), { crystalChange: { atS: 50, bareHz: 6_001_500 }, maxS: 200 });
    expect(alertCodes(run)).toContain('crystal-changed');
    const first = ofType(run.events, 'cut')[0];
    expect(first?.reason).toBe('crystal-thickness');
    const step = layer.rateNmPerS / edge.crystal.sampleRateHz;
    expect(Math.abs((run.trueNm[0] as number) - layer.targetNm)).toBeLessThan(2 * step);
  });

  it('a crystal that jumps down and stays there is an instrument fault: the layer goes to the clock, no ceiling cut', () => {
    // A mode hop of −3 kHz (about 100 nm of this film) from the middle of ar4's layer 3: not a
    // rate any source makes, not a fresh crystal.
    const reference = baseline(ar4, {});
    const fromS = startOf(reference, 3) + 60;
    const hop = (input: PipelineInput): PipelineInput =>
      input.kind === 'reading' && input.channel === 'crystal' && input.timeS >= fromS && input.timeS < fromS + 60 ? { ...input, value: input.value - 3000 } : input;
    const run = runIdeal(ar4, behind(createController(ar4), hop));
    expect(alertCodes(run)).toContain('crystal-implausible');
    expect(alertCodes(run)).not.toContain('thickness-ceiling');
    // The level cut needs no crystal, and the next layer's crystal starts from its own first reading.
    expectSameCuts(run, reference, 2 * READING_NM);
    expect(ofType(run.events, 'layer-finished').find((e) => e.layer === 3)?.crystalNm).toBeNaN();
  });
});

describe('an instrument clock that jumps', () => {
  it('restarted (its clock 500 s behind from mid-run on): re-based after a few readings, the crystal kept', () => {
    const reference = baseline(ar4, {});
    const fromS = startOf(reference, 3) + 30;
    const restarted = (input: PipelineInput): PipelineInput =>
      input.kind === 'reading' && input.channel === 'crystal' && input.timeS >= fromS ? { ...input, timeS: input.timeS - 500 } : input;
    const run = runIdeal(ar4, behind(createController(ar4), restarted));
    expect(alertCodes(run).filter((c) => c === 'clock-rebased')).toHaveLength(1);
    expect(alertCodes(run)).not.toContain('crystal-lost');
    expectSameCuts(run, reference, 2 * READING_NM);
  });

  it('every instrument 20 s ahead at once (a host that stalled): each re-based, the run clock never jumps', () => {
    const reference = baseline(ar4, {});
    const fromS = startOf(reference, 3) + 30;
    const ahead = (input: PipelineInput): PipelineInput => (input.kind === 'reading' && input.timeS >= fromS ? { ...input, timeS: input.timeS + 20 } : input);
    const run = runIdeal(ar4, behind(createController(ar4), ahead));
    expect(alertCodes(run).filter((c) => c === 'clock-rebased')).toHaveLength(2);
    expect(alertCodes(run)).not.toContain('crystal-lost');
    expect(alertCodes(run)).not.toContain('optical-lost');
    expect(alertCodes(run)).not.toContain('time-ceiling');
    expect(Math.abs(run.state.nowS - reference.state.nowS)).toBeLessThan(1);
    expectSameCuts(run, reference, 2 * READING_NM);
  });
});

describe('a short monitor gap', () => {
  for (const estimator of ['plain', 'fit'] as const) {
    it(`returns the layer to its planned optical cut when the monitor answers again (${estimator})`, () => {
      // edge layer 2 (level) runs from about 116 s to 268 s; the monitor is silent 150–152.5 s.
      const options = { replan: false, estimator };
      const reference = baseline(edge, options, { maxS: 400 });
      const run = runIdeal(edge, createController(edge, options), { opticalSilentS: [150, 152.5], maxS: 400 });
      const changes = ofType(run.events, 'mode-changed').filter((e) => e.layer === 2);
      expect(changes.map((c) => [c.from, c.to])).toEqual([
        ['level', 'crystal'],
        ['crystal', 'level'],
      ]);
      const restored = ofType(run.events, 'alert').find((a) => a.code === 'mode-restored');
      expect(restored?.severity).toBe('info');
      expect(restored?.layer).toBe(2);
      const cut = ofType(run.events, 'cut').find((c) => c.layer === 2);
      expect(cut?.reason).toBe(ofType(reference.events, 'cut').find((c) => c.layer === 2)?.reason);
      expect(Math.abs((run.trueNm[1] as number) - (reference.trueNm[1] as number))).toBeLessThan(0.1);
    });
  }
});

describe('a crystal that comes back', () => {
  it('takes its crystal-cut layer back from the clock, which would have cut it on the planned rate', () => {
    // ar4 layer 1 (crystal, 12.1 nm at 0.4 nm/s): the crystal is silent from 5 s to 8 s, and the
    // true rate is 10 % above the plan's, so the clock alone would cut it 10 % thick.
    const run = runIdeal(ar4, createController(ar4), { crystalSilentS: [5, 8], rateFactor: 1.1, maxS: 40 });
    const changes = ofType(run.events, 'mode-changed').filter((e) => e.layer === 1);
    expect(changes.map((c) => c.to)).toEqual(['time', 'crystal']);
    expect(alertCodes(run)).toContain('mode-restored');
    const layer = ar4.layers[0] as ResolvedRecipe['layers'][number];
    expect(ofType(run.events, 'cut')[0]?.reason).toBe('crystal-thickness');
    expect(Math.abs((run.trueNm[0] as number) - layer.targetNm)).toBeLessThan(2 * 1.1 * READING_NM);
  });
});

describe('a long monitor gap', () => {
  it('with the plain rule, a gap that hid two turning points keeps the layer on the crystal; one that hid one does not', () => {
    // edge layer 27 (level, 170.7 nm on the chip, 244 s) turns at 50.0 and 151.6 nm (plan).
    const options = { replan: false };
    const reference = baseline(edge, options);
    const startS = startOf(reference, 27);
    const modes = (silentS: [number, number]): string[] => {
      const run = runIdeal(edge, createController(edge, options), { opticalSilentS: silentS });
      return ofType(run.events, 'mode-changed')
        .filter((e) => e.layer === 27)
        .map((e) => e.to);
    };
    expect(modes([startS + 60, startS + 225])).toEqual(['crystal']);
    expect(modes([startS + 60, startS + 100])).toEqual(['crystal', 'level']);
  });
});

describe('a monitor gap on a turning-point layer', () => {
  it('with the plain rule, keeps the layer on the crystal; with the fit, takes it back to its turning point', () => {
    // mirror layer 3 (turning point): the monitor silent for 10 s from 20 s into the layer.
    const reference = baseline(mirror, { replan: false });
    const startS = startOf(reference, 3);
    const layer3 = (estimator: 'plain' | 'fit'): { modes: string[]; reason: string | undefined; errorNm: number } => {
      const run = runIdeal(mirror, createController(mirror, { replan: false, estimator }), { opticalSilentS: [startS + 20, startS + 30] });
      const modes = ofType(run.events, 'mode-changed').filter((e) => e.layer === 3).map((e) => e.to);
      const reason = ofType(run.events, 'cut').find((c) => c.layer === 3)?.reason;
      return { modes, reason, errorNm: (run.trueNm[2] as number) - (mirror.layers[2]?.targetNm as number) };
    };
    const plain = layer3('plain');
    expect(plain.modes).toEqual(['crystal']);
    expect(plain.reason).toBe('crystal-thickness');
    // The ideal crystal knows the tooling exactly: within a few readings' growth and the shutter delay.
    expect(Math.abs(plain.errorNm)).toBeLessThan(2);
    const fit = layer3('fit');
    expect(fit.modes).toEqual(['crystal', 'turning-point']);
    expect(fit.reason).toBe('model-fit');
  });
});

describe('a flood of bad lines', () => {
  it('3,000 garbled lines over 300 s: the first raises its alert, then a few summaries that count the rest', () => {
    const inject = Array.from({ length: 3000 }, (_, k) => {
      const atS = 10 + k * 0.1;
      const input: PipelineInput = { kind: 'fault', channel: 'optical', code: 'garbled', line: `#${k}~~`, offset: 0, arrivalS: atS };
      return { atS, input };
    });
    const run = runIdeal(ar4, createController(ar4), { inject });
    expect(run.state.faults.garbled).toBe(3000);
    const alerts = ofType(run.events, 'alert').filter((a) => a.code === 'fault-garbled');
    // One a 30 s of run time at most: the first, and at most 10 summaries for 300 s.
    expect(alerts.length).toBeGreaterThanOrEqual(2);
    expect(alerts.length).toBeLessThanOrEqual(11);
    const more = alerts.slice(1).map((a) => Number(/(\d+) more/.exec(a.message)?.[1]));
    expect(1 + more.reduce((sum, n) => sum + n, 0)).toBe(3000);
    expect(alerts.at(-1)?.message).toMatch(/3000 in all/);
  });
});
