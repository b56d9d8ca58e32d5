// The plan's advice must be advice one can follow: a suggested wavelength the recipe's own
// validator accepts, turning-point layers left on their turns, imprecise cuts judged with the
// layers below and each warning saying what to do.
import { mkdtempSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join, resolve } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadDesign, loadMaterialLibrary } from '../../../src/config/load-design.ts';
import { loadRecipe } from '../../../src/config/load-recipe.ts';
import { readYamlFile } from '../../../src/config/read-config.ts';
import { planRun } from '../../../src/model/plan/plan.ts';
import { RecipeSchema, resolveRecipe } from '../../../src/model/plan/recipe.ts';

const root = fileURLToPath(new URL('../../../', import.meta.url));
const library = loadMaterialLibrary();
const recipeFile = (name: string): string => join(root, `config/recipes/${name}.yaml`);

describe('suggested wavelengths', () => {
  for (const name of ['ar4-visible', 'edge-longpass-visible', 'mirror-1064']) {
    it(`${name}: every suggestion, written into the recipe, is accepted by the recipe's validator`, () => {
      const file = recipeFile(name);
      const plan = planRun(loadRecipe(file, library));
      const raw = readYamlFile(file) as { design: string; layers?: Record<string, object> };
      const layers: Record<string, object> = { ...raw.layers };
      const suggested = plan.layers.filter((l) => l.suggestion !== undefined);
      expect(suggested.length).toBeGreaterThan(0);
      for (const l of suggested) layers[String(l.number)] = { ...layers[String(l.number)], wavelengthNm: l.suggestion?.wavelengthNm };
      const recipe = RecipeSchema.parse({ ...raw, layers });
      const result = resolveRecipe(recipe, loadDesign(resolve(root, 'config/recipes', raw.design), library), library);
      expect(result.ok ? [] : result.violations).toEqual([]);
    });
  }

  it('keeps a turning-point layer at its wavelength, per layer and in the whole-run plan', () => {
    // The mirror's layers are quarter-waves cut on their turns at 1064 nm, where the cuts
    // correct the errors of the layers below at the wavelength that matters; a wavelength with a
    // better noise-only figure would give that up (and the layer would not end on a turn there).
    const mirror = loadRecipe(recipeFile('mirror-1064'), library);
    const plan = planRun(mirror, { suggest: 'whole-run' });
    for (const l of plan.layers) {
      expect(l.cut).toBe('turning-point');
      expect(l.suggestion?.wavelengthNm, `layer ${l.number}`).toBe(1064);
      expect(l.wholeRunWavelengthNm, `layer ${l.number}`).toBe(1064);
    }
    // Level layers still get the search's best.
    const edge = planRun(loadRecipe(recipeFile('edge-longpass-visible'), library));
    expect(edge.layers.some((l) => l.cut === 'level' && l.suggestion !== undefined && l.suggestion.wavelengthNm !== l.wavelengthNm)).toBe(true);
  });
});

describe('plan warnings', () => {
  const tempRecipe = (yaml: string): string => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-advice-'));
    writeFileSync(join(dir, 'recipe.yaml'), yaml);
    return join(dir, 'recipe.yaml');
  };

  it('judges imprecise-cut on the stack figure: a thin low-index layer on a layer cut by the crystal', () => {
    // A 31 nm SiO2 layer monitored on a 12 nm TiO2 layer cut on the crystal (1 % tooling
    // uncertainty): noise alone would allow it, the layer below does not.
    const file = tempRecipe(`formatVersion: 1
name: thin on crystal
design:
  formatVersion: 1
  name: two thin layers
  substrate: { material: N-BK7 }
  layers:
    - { material: TiO2, thicknessNm: 12 }
    - { material: SiO2, thicknessNm: 31 }
defaults: { wavelengthNm: 500, cut: level }
layers:
  "1": { cut: crystal }
`);
    const layer = planRun(loadRecipe(file, library)).layers[1];
    expect(layer?.cut).toBe('level');
    expect(layer?.precisionPercent).toBeLessThan(1);
    expect(layer?.stackPrecisionPercent).toBeGreaterThan(1);
    const warning = layer?.warnings.find((w) => w.code === 'imprecise-cut');
    expect(warning?.message).toMatch(/^the expected precision with the layers below is \d+\.\d\d % of the thickness \(\d+\.\d\d % from noise alone\): /);
    // It says what to do: here the first SiO2 layer's unknown index sets the limit, and the
    // crystal (its tooling known to 1 %) does better.
    expect(warning?.message).toMatch(/cut it on the crystal \(1\.00 %\)/);
  });

  it('says what every warning means and what to do; a trigger near a turn concerns the plain rule', () => {
    const edge = loadRecipe(recipeFile('edge-longpass-visible'), library);
    const uniform = { ...edge, layers: edge.layers.map((l) => ({ ...l, cutSetting: 'auto' as const, wavelengthNm: 600 })) };
    const plan = planRun(uniform);
    const near = plan.layers.flatMap((l) => l.warnings.filter((w) => w.code === 'trigger-near-turning-point'));
    expect(near.length).toBeGreaterThan(0);
    for (const w of near) {
      expect(w.message).toMatch(/from a turning point, where the signal is nearly flat and a level crossing is slow to show/);
      expect(w.message).toMatch(/this concerns the plain rule \(the model fit uses the whole curve\)/);
      expect(w.message).toMatch(/monitor at \d+ nm \(the search's best\) or cut on the turning point$/);
    }
    const mirror = planRun(loadRecipe(recipeFile('mirror-1064'), library));
    for (const w of [...plan.layers, ...mirror.layers].flatMap((l) => l.warnings)) {
      expect(w.message, w.code).toMatch(/[:;] .*(monitor at|fresh chip|on the crystal|cut on|choose|calibrate|change the crystal)/);
    }
  });
});
