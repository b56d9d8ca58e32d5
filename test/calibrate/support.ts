/**
 * Simulated runs for the calibration tests: a whole run on the virtual chamber, its journal's
 * records kept in memory (as the journal writer would write them), the chamber's truth, and the
 * finished part measured as `fringe simulate --measured-out` measures it.
 */
import { fileURLToPath } from 'node:url';
import { createVirtualChamber, measureParts, SimProfileSchema, type ChamberTruth, type SimProfile } from '../../sim/index.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import type { JournalRecord } from '../../src/journal/journal-format.ts';
import { createInputRecorder } from '../../src/journal/journal-format.ts';
import type { ResolvedRecipe } from '../../src/model/plan/recipe.ts';
import { createController } from '../../src/pipeline/controller.ts';
import { runStepped } from '../../src/pipeline/run-stepped.ts';
import type { MeasuredSpectrum } from '../../src/calibrate/measured-spectrum.ts';

export const recipeFile = (name: string): string => fileURLToPath(new URL(`../../config/recipes/${name}.yaml`, import.meta.url));

export function loadShippedRecipe(name: string): ResolvedRecipe {
  return loadRecipe(recipeFile(name));
}

/** A profile with the given hidden errors per material, in percent (index scatter 0, so the index error is exactly the one given). */
export function profileWithErrors(errors: Record<string, { chip: number; tooling: number; index: number }>, base: Record<string, unknown> = {}): SimProfile {
  const sources: Record<string, unknown> = { default: {} };
  const materials: Record<string, unknown> = { default: { indexScatterPercent: 0, indexOffsetPercent: 0 } };
  for (const [name, e] of Object.entries(errors)) {
    sources[name] = { chipRatioErrorPercent: e.chip, toolingErrorPercent: e.tooling };
    materials[name] = { indexOffsetPercent: e.index };
  }
  return SimProfileSchema.parse({ formatVersion: 1, name: 'hidden errors', sources, materials, ...base });
}

export interface SimulatedForCalibration {
  records: JournalRecord[];
  truth: ChamberTruth;
  measured: MeasuredSpectrum;
}

export function simulateForCalibration(recipe: ResolvedRecipe, profile: SimProfile, seed: number): SimulatedForCalibration {
  const chamber = createVirtualChamber(recipe, profile, seed);
  const records: JournalRecord[] = [];
  const recordInput = createInputRecorder();
  runStepped(createController(recipe, { estimator: 'fit' }), chamber, {
    onInput: (input) => records.push(...recordInput(input)),
    onEvent: (event) => records.push({ k: 'e', event }),
  });
  const truth = chamber.truth();
  const m = measureParts(recipe, truth, profile, seed, 'T');
  if (!m) throw new Error(`${recipe.name} has no design band to measure over`);
  const measured: MeasuredSpectrum = {
    source: `measured part (seed ${seed})`,
    quantity: 'T',
    scale: 'fraction',
    scaleReason: 'given',
    wavelengthsNm: m.wavelengthsNm,
    values: m.values,
    counts: new Float64Array(m.values.length).fill(1),
    header: [],
    duplicatedWavelengths: 0,
  };
  return { records, truth, measured };
}
