/**
 * `fringe plan RECIPE`: what every signal should do, layer by layer, and how precisely each
 * layer can be cut — as a table, JSON, and/or an SVG plot of the whole run's monitor signal.
 */
import { parseCommandArgs } from '../parse-command-args.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { planRun, type RunPlan } from '../../model/plan/plan.ts';
import { CUT_MODE_SHORT } from '../../pipeline/cut-words.ts';
import { renderLineChart, type ChartMarker, type ChartPoint } from '../../report/index.ts';
import { CliError, numberOption, outputFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';

export const planUsage = `Usage: fringe plan RECIPE [options]

For every layer: the predicted monitor signal, turning points, trigger level, swing, slope,
the expected precision of the cut, warnings, a suggested monitor wavelength, and the crystal.

  --json                print the whole plan as one object with a "layers" array
  --plot FILE.svg       write the whole run's predicted monitor signal with every cut marked
  --noise PCT           rms noise of one optical reading, % (default: the recipe's, else 0.1)
  --sample-rate HZ      optical readings per second (default: the recipe's, else 10)
  --whole-run           also suggest one wavelength plan for the run with few changes
  --no-suggest          skip the wavelength search
  --materials FILE      material library (default: the shipped config/materials.yaml)
`;

export function runPlan(argv: string[], io: CommandIo): number {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      json: { type: 'boolean' },
      plot: { type: 'string' },
      noise: { type: 'string' },
      'sample-rate': { type: 'string' },
      'whole-run': { type: 'boolean' },
      'no-suggest': { type: 'boolean' },
      materials: { type: 'string' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(planUsage);
    return 0;
  }
  if (positionals.length !== 1) throw new CliError('plan needs exactly one RECIPE file (see fringe plan --help)');
  if (values['whole-run'] && values['no-suggest']) throw new CliError('--whole-run needs the wavelength search; drop --no-suggest');
  const noisePercent = numberOption('noise', values.noise);
  if (noisePercent !== undefined && !(noisePercent > 0 && noisePercent < 100)) {
    throw new CliError(`--noise must be a percentage above 0 and below 100, got ${noisePercent}`);
  }
  const sampleRateHz = numberOption('sample-rate', values['sample-rate']);
  if (sampleRateHz !== undefined && !(sampleRateHz > 0 && sampleRateHz <= 1e5)) {
    throw new CliError(`--sample-rate must be above 0 and at most 100000 Hz, got ${sampleRateHz}`);
  }
  const recipe = loadRecipe(positionals[0] as string, loadMaterialLibrary(values.materials));
  const plan = planRun(recipe, {
    ...(noisePercent !== undefined ? { noise: noisePercent / 100 } : {}),
    ...(sampleRateHz !== undefined ? { sampleRateHz } : {}),
    suggest: values['no-suggest'] ? 'none' : values['whole-run'] ? 'whole-run' : 'per-layer',
  });
  if (values.plot !== undefined) {
    writeOutputFile(outputFileOption('plot', values.plot), plotRun(plan));
    io.err(`wrote ${values.plot}`);
  }
  io.out(values.json ? JSON.stringify(plan) : formatPlan(plan));
  return 0;
}

function formatPlan(plan: RunPlan): string {
  const pct = (x: number): string => (x * 100).toFixed(2);
  const rows = [
    `${plan.recipe}: layers ${plan.fromLayer}–${plan.fromLayer + plan.layers.length - 1}, ${formatDuration(plan.durationS)} planned; noise ${(plan.noise * 100).toFixed(3)} % at ${plan.sampleRateHz} Hz`,
    '',
    ' #  material  target nm  cut          λ nm   chip     start %   cut %  trigger %  TPs  swing %  slope %/nm  ±nm fit  ±nm stack  ±nm rule  best λ (±%)    crystal Hz   time',
  ];
  for (const l of plan.layers) {
    const suggestion = l.suggestion ? `${l.suggestion.wavelengthNm} (${l.suggestion.precisionPercent.toFixed(2)})` : '—';
    rows.push(
      [
        String(l.number).padStart(2),
        l.material.padEnd(9),
        l.targetNm.toFixed(2).padStart(9),
        CUT_MODE_SHORT[l.cut].padEnd(11),
        String(l.wavelengthNm).padStart(6),
        l.chip.padEnd(7),
        pct(l.startSignal).padStart(8),
        pct(l.cutSignal).padStart(7),
        pct(l.triggerSignal).padStart(10),
        String(l.turningPointsBeforeCut).padStart(4),
        pct(l.swing).padStart(8),
        (l.slopePerNm * 100).toFixed(3).padStart(11),
        l.precisionNm.toFixed(3).padStart(8),
        l.stackPrecisionNm.toFixed(3).padStart(10),
        l.plainRulePrecisionNm.toFixed(3).padStart(9),
        suggestion.padStart(13),
        l.crystal.cutFrequencyHz.toFixed(1).padStart(13),
        formatDuration(l.durationS).padStart(6),
      ].join(' '),
    );
  }
  const warnings = plan.layers.flatMap((l) => l.warnings.map((w) => `  layer ${l.number}: ${w.message} [${w.code}]`));
  if (warnings.length > 0) rows.push('', 'Warnings:', ...warnings);
  if (plan.wholeRun) {
    rows.push('', `Whole-run wavelength plan (${plan.wholeRun.changes} changes): ${plan.layers.filter((l) => l.wholeRunWavelengthNm !== undefined).map((l) => `${l.number}:${l.wholeRunWavelengthNm}`).join(' ')}`);
  }
  rows.push('', '±nm fit: the bound of the model fit over the layer’s readings; ±nm rule: the plain crossing or turning-point rule.');
  return rows.join('\n');
}

function formatDuration(seconds: number): string {
  const s = Math.round(seconds);
  const h = Math.floor(s / 3600);
  const m = Math.floor((s % 3600) / 60);
  const r = s % 60;
  return h > 0 ? `${h}:${String(m).padStart(2, '0')}:${String(r).padStart(2, '0')}` : `${m}:${String(r).padStart(2, '0')}`;
}

/** The run's predicted signal layer after layer, against the cumulative deposited thickness on the chips. */
function plotRun(plan: RunPlan): string {
  const x: number[] = [];
  const y: number[] = [];
  const markers: ChartMarker[] = [];
  const points: ChartPoint[] = [];
  let offset = 0;
  for (const l of plan.layers) {
    // A new chip starts bare: break the line there.
    if (l.layerOnChip === 1 && x.length > 0) {
      x.push(offset);
      y.push(Number.NaN);
    }
    const cutIndex = Math.round(l.chipTargetNm / l.curve.stepNm);
    for (let k = 0; k <= cutIndex && k < l.curve.signal.length; k++) {
      x.push(offset + k * l.curve.stepNm);
      y.push(l.curve.signal[k] as number);
    }
    for (const tp of l.turningPoints) {
      if (tp.thicknessNm <= l.chipTargetNm + 1e-9) points.push({ x: offset + tp.thicknessNm, y: tp.signal, shape: 'tick' });
    }
    offset += l.chipTargetNm;
    markers.push({ x: offset, ...(plan.layers.length <= 30 ? { label: `${l.number}` } : {}) });
  }
  return renderLineChart([{ label: 'predicted monitor signal', x, y }], {
    title: `${plan.recipe}: predicted monitor signal, cuts marked`,
    xLabel: 'Deposited thickness on the witness chips (nm)',
    yLabel: 'Signal (%)',
    yPercent: true,
    width: 1100,
    height: 520,
    markers,
    points,
  });
}
