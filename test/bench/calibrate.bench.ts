/**
 * Calibration speed (issue 11): the 27-layer edge filter run on the uncalibrated profile's
 * errors, calibrated from its journal's records and one measured spectrum — reading the
 * records into the fit's data and the fit itself, timed together. Goal: under 10 s.
 */
import { calibrate, collectRunData } from '../../src/calibrate/index.ts';
import { loadShippedRecipe, profileWithErrors, simulateForCalibration } from '../calibrate/support.ts';
import type { Benchmark, BenchResult } from './harness.ts';

export const calibrateBenchmarks: Benchmark[] = [
  {
    name: 'calibrate.run27',
    run(): BenchResult[] {
      const recipe = loadShippedRecipe('edge-longpass-visible');
      const sim = simulateForCalibration(recipe, profileWithErrors({ TiO2: { chip: 0.5, tooling: 1.5, index: 1 }, SiO2: { chip: 0.5, tooling: 1.5, index: 1 } }), 1);
      const start = process.hrtime.bigint();
      const data = collectRunData('run27', recipe, sim.records);
      const result = calibrate([data], [{ run: 0, spectrum: sim.measured }]);
      const wallS = Number(process.hrtime.bigint() - start) / 1e9;
      const readings = sim.records.filter((r) => r.k === 'r').length;
      return [{ name: 'calibrate.run27.seconds', value: wallS, unit: 's', note: `${recipe.layers.length} layers, ${readings} readings, one measured spectrum, ${result.iterations} iterations; goal < 10 s` }];
    },
  },
];
