// Shared set-up for the server tests: the shipped recipes and simulator profile, and a run on the
// virtual chamber behind a hub that the test steps by hand (no wall clock, no pacing).
import { mkdtempSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { createVirtualChamber, loadSimProfile, type SimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { createController } from '../../src/pipeline/controller.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';
import { createSteppedRun, type SteppedRun } from '../../src/pipeline/run-stepped.ts';
import type { PipelineInput } from '../../src/pipeline/types.ts';
import { createRunHub, type RunHub, type RunHubOptions } from '../../src/server/run-hub.ts';

const configFile = (path: string): string => fileURLToPath(new URL(`../../config/${path}`, import.meta.url));

export const ar4 = loadRecipe(configFile('recipes/ar4-visible.yaml'));
export const edge = loadRecipe(configFile('recipes/edge-longpass-visible.yaml'));
export const typical = loadSimProfile(configFile('sim/typical.yaml'));

/** The typical profile with the optical monitor sampling at `hz`. */
export function withOpticalRate(profile: SimProfile, hz: number): SimProfile {
  return { ...profile, optical: { ...profile.optical, sampleRateHz: hz } };
}

export interface ManualRun {
  hub: RunHub;
  run: SteppedRun;
  /** Every input and event, as the run reported them. */
  inputs: PipelineInput[];
  events: RunEvent[];
}

/** A hub over a stepped run on the virtual chamber; nothing happens until the test calls `run.runUntil`. */
export function manualRun(recipe: ResolvedRecipe, options: { profile?: SimProfile; seed?: number; hub?: Partial<RunHubOptions>; estimator?: 'plain' | 'fit' } = {}): ManualRun {
  const estimator = options.estimator ?? 'plain';
  const hub = createRunHub({ recipe, source: 'simulated', runId: 'test-run', speed: null, estimator, ...options.hub });
  const inputs: PipelineInput[] = [];
  const events: RunEvent[] = [];
  const run = createSteppedRun(createController(recipe, { estimator }), createVirtualChamber(recipe, options.profile ?? typical, options.seed ?? 1), {
    onInput: (input) => {
      inputs.push(input);
      hub.feed.input(input);
    },
    onEvent: (event) => {
      events.push(event);
      hub.feed.event(event);
    },
  });
  hub.attach(run);
  return { hub, run, inputs, events };
}

export const tempDir = (prefix: string): string => mkdtempSync(join(tmpdir(), `fringe-${prefix}-`));

/** Test tokens: long enough for the server, distinct enough to search logs for. */
export const TOKEN = 'command-token-0123456789abcdef';
export const VIEWER_TOKEN = 'viewer-token-fedcba9876543210';

/** Lets queued microtasks (the hub's coalesced snapshots) run. */
export const settle = (): Promise<void> => new Promise((resolve) => setImmediate(resolve));
