/**
 * Shared pieces of the simulator tests: the demo recipes, profiles built on the ideal one, a
 * 40-layer recipe, and a tiny oracle controller that cuts each layer when the TRUE chip
 * thickness reaches its target (the real controller is the pipeline's, not this).
 */
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { loadMaterialLibrary, resolveDesignData } from '../../src/config/load-design.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { RecipeSchema, resolveRecipe, type ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import type { Reading, ShutterAck } from '../../src/pipeline/types.ts';
import { loadSimProfile, SimProfileSchema, type SimProfile, type VirtualChamber } from '../../sim/index.ts';

export const root = fileURLToPath(new URL('../../', import.meta.url));
export const library = loadMaterialLibrary();
export const recipes = {
  ar4: loadRecipe(join(root, 'config/recipes/ar4-visible.yaml'), library),
  edge: loadRecipe(join(root, 'config/recipes/edge-longpass-visible.yaml'), library),
  mirror: loadRecipe(join(root, 'config/recipes/mirror-1064.yaml'), library),
};
export const profiles = {
  ideal: loadSimProfile(join(root, 'config/sim/ideal.yaml')),
  typical: loadSimProfile(join(root, 'config/sim/typical.yaml')),
  harsh: loadSimProfile(join(root, 'config/sim/harsh.yaml')),
  uncalibrated: loadSimProfile(join(root, 'config/sim/uncalibrated.yaml')),
};

type Patch = { [key: string]: unknown };

function merge(base: unknown, patch: unknown): unknown {
  if (patch === null || typeof patch !== 'object' || Array.isArray(patch)) return patch;
  const out: Record<string, unknown> = { ...(base as Record<string, unknown>) };
  for (const [k, v] of Object.entries(patch)) out[k] = merge(out[k], v);
  return out;
}

/** The ideal profile with `patch` merged in (objects key by key), validated. */
export function idealWith(patch: Patch): SimProfile {
  return SimProfileSchema.parse(merge(profiles.ideal, patch));
}

/** A 40-layer quarter-wave stack (HL)^20 at 550 nm, TiO2/SiO2 on N-BK7, slow enough to last about 4 h. */
export function fortyLayerRecipe(opticalRateHz: number, crystalRateHz: number): ResolvedRecipe {
  const design = resolveDesignData(
    {
      formatVersion: 1,
      name: 'forty layers',
      incident: 'Air',
      substrate: { material: 'N-BK7' },
      referenceWavelengthNm: 550,
      shorthand: { formula: '(HL)^20', symbols: { H: 'TiO2', L: 'SiO2' } },
    },
    library,
    'forty layers',
  );
  const recipe = RecipeSchema.parse({
    formatVersion: 1,
    name: 'forty layers',
    design: { formatVersion: 1, name: 'unused', substrate: { material: 'N-BK7' }, layers: [{ material: 'SiO2', thicknessNm: 1 }] },
    process: { TiO2: { rateNmPerS: 0.12, toolingFactor: 1.1 }, SiO2: { rateNmPerS: 0.35, toolingFactor: 1.05 } },
    monitor: { sampleRateHz: opticalRateHz },
    crystal: { sampleRateHz: crystalRateHz },
    defaults: { wavelengthNm: 550, bandwidthNm: 2 },
  });
  const resolved = resolveRecipe(recipe, design, library);
  if (!resolved.ok) throw new Error(JSON.stringify(resolved.violations));
  return resolved.recipe;
}

export interface OracleRun {
  readings: Reading[];
  acks: ShutterAck[];
}

/**
 * Opens layer 1 at t = 0, closes each layer (at the reading's time) once the true chip
 * thickness reaches the recipe's chip target, opens the next when the close is acknowledged.
 * Stops after `lastLayer` is acknowledged closed, or at `maxTimeS`. `onReading` sees every
 * reading right after it is produced (the chamber is at the reading's time).
 */
export function runOracle(
  chamber: VirtualChamber,
  recipe: ResolvedRecipe,
  options: { lastLayer?: number; maxTimeS?: number; onReading?: (reading: Reading) => void } = {},
): OracleRun {
  const lastLayer = options.lastLayer ?? recipe.layers.length;
  const maxTimeS = options.maxTimeS ?? 1e6;
  const readings: Reading[] = [];
  const acks: ShutterAck[] = [];
  let layer = 1;
  let closing = false;
  const first = recipe.layers[0] as ResolvedRecipe['layers'][number];
  chamber.command({ kind: 'shutter', action: 'open', source: first.materialName, layer: 1, timeS: 0 });
  while (layer <= lastLayer) {
    const t = chamber.nextReadingTimeS();
    if (t > maxTimeS) break;
    const fresh: Reading[] = [];
    chamber.advance(t, (r) => fresh.push(r));
    for (const r of fresh) {
      readings.push(r);
      options.onReading?.(r);
    }
    const settings = recipe.layers[layer - 1] as ResolvedRecipe['layers'][number];
    if (!closing) {
      const top = chamber.truth().layers.at(-1);
      if (top !== undefined && top.number === layer && top.growing && top.chipNm >= settings.targetNm * settings.chipRatio) {
        chamber.command({ kind: 'shutter', action: 'close', source: top.material, layer, timeS: chamber.timeS });
        closing = true;
      }
    }
    for (const ack of chamber.takeAcks()) {
      acks.push(ack);
      if (ack.action === 'close' && closing) {
        closing = false;
        layer++;
        const next = recipe.layers[layer - 1];
        if (next !== undefined && layer <= lastLayer) {
          chamber.command({ kind: 'shutter', action: 'open', source: next.materialName, layer, timeS: chamber.timeS });
        }
      }
    }
  }
  return { readings, acks };
}

/** Sample mean and rms about the mean. */
export function meanAndRms(values: readonly number[]): { mean: number; rms: number } {
  let sum = 0;
  for (const v of values) sum += v;
  const mean = sum / values.length;
  let ss = 0;
  for (const v of values) ss += (v - mean) * (v - mean);
  return { mean, rms: Math.sqrt(ss / (values.length - 1)) };
}

/** Sample autocorrelation at `lag` samples. */
export function autocorrelation(values: readonly number[], lag: number): number {
  const { mean } = meanAndRms(values);
  let num = 0;
  let den = 0;
  for (let i = 0; i < values.length; i++) {
    const d = (values[i] as number) - mean;
    den += d * d;
    if (i + lag < values.length) num += d * ((values[i + lag] as number) - mean);
  }
  return num / den;
}
