/**
 * A proposed monitoring strategy: layer by layer, in deposition order, the cut mode and monitor
 * wavelength that lower the plan's own expected error of the whole run, judged on the stack
 * figure (the layers below uncertain) so that a choice that would leave a later layer on a poor
 * chip is seen. A first, simple search (issue 12): greedy over the layers, a few candidates each
 * — the recipe's setting, the crystal, and a level or the layer's turn at the wavelength search's
 * best — each judged by a whole plan. Fresh chips and the predicted yield are not proposed yet.
 */
import { planRun, type LayerPlan, type RunPlan } from './plan.ts';
import type { CutModeSetting, LayerRecipe, ResolvedRecipe } from './recipe.ts';

export interface ProposedChange {
  layer: number;
  from: { cut: LayerPlan['cut']; wavelengthNm: number };
  to: { cut: LayerPlan['cut']; wavelengthNm: number };
  /** The layer's stack figure before and after, % of its thickness. */
  beforePercent: number;
  afterPercent: number;
  /** The whole run's cost before and after this change (Σ stack figure², %²). */
  costBefore: number;
  costAfter: number;
}

export interface Proposal {
  recipe: ResolvedRecipe;
  plan: RunPlan;
  changes: ProposedChange[];
  /** Σ over the layers of the stack figure squared, %², before and after. */
  costBefore: number;
  costAfter: number;
}

/**
 * The run's cost: the sum of the layers' squared stack figures (% of thickness). Without
 * tolerances this stands for the spectrum's expected deviation: every layer's error counts, the
 * worst most.
 */
export function planCost(plan: RunPlan): number {
  return plan.layers.reduce((sum, l) => sum + l.stackPrecisionPercent ** 2, 0);
}

/** A change is taken only when it lowers the cost by more than this fraction (a tie keeps the recipe's choice). */
const MIN_GAIN = 0.01;

export function proposeStrategy(recipe: ResolvedRecipe): Proposal {
  // Wavelength suggestions for every layer, crystal-cut ones too (planned as if optical).
  const asOptical: ResolvedRecipe = {
    ...recipe,
    layers: recipe.layers.map((l) => (l.cutSetting === 'crystal' || l.cutSetting === 'time' ? { ...l, cutSetting: 'auto' as const } : l)),
  };
  const suggestions = new Map(planRun(asOptical, { suggest: 'per-layer', stackPrecision: false }).layers.map((l) => [l.number, l.suggestion?.wavelengthNm]));

  let current = recipe;
  let plan = planRun(current, { suggest: 'none' });
  const costBefore = planCost(plan);
  let cost = costBefore;
  const changes: ProposedChange[] = [];
  for (const layer of recipe.layers) {
    const i = layer.number - 1;
    const now = plan.layers[i] as LayerPlan;
    const candidates: { cutSetting: CutModeSetting; wavelengthNm: number }[] = [{ cutSetting: 'crystal', wavelengthNm: layer.wavelengthNm }];
    const suggested = suggestions.get(layer.number);
    if (suggested !== undefined && suggested !== layer.wavelengthNm) candidates.push({ cutSetting: 'auto', wavelengthNm: suggested });
    if (now.cut === 'crystal' || now.cut === 'time') candidates.push({ cutSetting: 'auto', wavelengthNm: layer.wavelengthNm });
    let best: { recipe: ResolvedRecipe; plan: RunPlan; cost: number } | undefined;
    for (const c of candidates) {
      if (c.cutSetting === current.layers[i]?.cutSetting && c.wavelengthNm === current.layers[i]?.wavelengthNm) continue;
      const trial = withLayer(current, i, c);
      const trialPlan = planRun(trial, { suggest: 'none' });
      const trialCost = planCost(trialPlan);
      if (trialCost < (best?.cost ?? cost * (1 - MIN_GAIN))) best = { recipe: trial, plan: trialPlan, cost: trialCost };
    }
    if (!best) continue;
    const after = best.plan.layers[i] as LayerPlan;
    changes.push({
      layer: layer.number,
      from: { cut: now.cut, wavelengthNm: now.wavelengthNm },
      to: { cut: after.cut, wavelengthNm: after.wavelengthNm },
      beforePercent: now.stackPrecisionPercent,
      afterPercent: after.stackPrecisionPercent,
      costBefore: cost,
      costAfter: best.cost,
    });
    current = best.recipe;
    plan = best.plan;
    cost = best.cost;
  }
  return { recipe: current, plan, changes, costBefore, costAfter: cost };
}

function withLayer(recipe: ResolvedRecipe, index: number, setting: { cutSetting: CutModeSetting; wavelengthNm: number }): ResolvedRecipe {
  return { ...recipe, layers: recipe.layers.map((l, k): LayerRecipe => (k === index ? { ...l, ...setting } : l)) };
}
