/**
 * `fringe plan RECIPE`: what every signal should do, layer by layer, and how precisely each
 * layer can be cut — as a table, JSON, and/or an SVG plot of the whole run's monitor signal.
 */
import { dirname, relative, resolve } from 'node:path';
import { Document } from 'yaml';
import { parseCommandArgs } from '../parse-command-args.ts';
import { readYamlFile } from '../../config/read-config.ts';
import { fileURLToPath } from 'node:url';
import { loadSimProfile, materialSettingsFor, type SimProfile } from '../../../sim/index.ts';
import { FLAG_PERCENT, proposeStrategy, type Proposal } from '../../model/plan/propose.ts';
import { studyRange, type Prediction, type ProcessSpread } from '../../model/plan/predicted-yield.ts';
import { loadMaterialLibrary } from '../../config/load-design.ts';
import { loadRecipe } from '../../config/load-recipe.ts';
import { planRun, type LayerPlan, type RunPlan } from '../../model/plan/plan.ts';
import { CUT_MODE_SHORT, CUT_MODE_WORDS } from '../../pipeline/cut-words.ts';
import { renderLineChart, type ChartBand, type ChartLegendEntry, type ChartMarker, type ChartPoint } from '../../report/index.ts';
import { CliError, numberOption, outputFileOption, plotFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';

const DEFAULT_PROFILE = fileURLToPath(new URL('../../../config/sim/typical.yaml', import.meta.url));

/**
 * How a simulator profile puts a run's film indices off the design's: its offset, every
 * material's, and its scatter, each material's own.
 */
function spreadOfProfile(profile: SimProfile): ProcessSpread {
  const m = materialSettingsFor(profile, 'default');
  return { indexOffset: m.indexOffsetPercent / 100, indexCommonSigma: 0, indexMaterialSigma: m.indexScatterPercent / 100 };
}

export const planUsage = `Usage: fringe plan RECIPE [options]

For every layer: the predicted monitor signal, turning points, trigger level, swing, slope,
the expected precision of the cut, warnings, a suggested monitor wavelength, and the crystal.

  --json                print the whole plan as one object with a "layers" array
  --plot FILE.svg       write the whole run's predicted monitor signal with every cut marked
  --noise PCT           rms noise of one optical reading, % (default: the recipe's, else 0.1)
  --sample-rate HZ      optical readings per second (default: the recipe's, else 10)
  --whole-run           also suggest one wavelength plan for the run with few changes
  --no-suggest          skip the wavelength search
  --propose FILE.yaml   search, per layer, the cut (crystal, level or turn), the monitor wavelength
                        and where fresh witness chips start, for the highest predicted yield (the
                        plan's error model as the model fit cuts, sampled against the design's
                        tolerances; without them, the smallest expected deviation); write the
                        recipe with them to FILE.yaml and print what changed and why
  --max-chips N         with --propose: witness chips allowed in all (default: the recipe's)
  --profile FILE        with --propose: the simulator profile whose index spread the prediction
                        assumes (default: config/sim/typical.yaml, as fringe study)
  --runs N              with --propose: the study size the predicted range is given for (default 50)
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
      propose: { type: 'string' },
      'max-chips': { type: 'string' },
      profile: { type: 'string' },
      runs: { type: 'string' },
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
  if (values.propose !== undefined && !/\.ya?ml$/i.test(values.propose)) {
    throw new CliError(`--propose writes a recipe: name a file ending in .yaml, got "${values.propose}"`);
  }
  if (values.propose !== undefined && (values.json || values.plot !== undefined || noisePercent !== undefined || sampleRateHz !== undefined)) {
    throw new CliError('--propose plans with the recipe\'s own monitor and prints its own report: drop --json, --plot, --noise and --sample-rate');
  }
  if (values.propose === undefined && (values['max-chips'] !== undefined || values.profile !== undefined || values.runs !== undefined)) {
    throw new CliError('--max-chips, --profile and --runs belong to --propose');
  }
  const maxChips = numberOption('max-chips', values['max-chips']);
  if (maxChips !== undefined && !(Number.isInteger(maxChips) && maxChips >= 1 && maxChips <= 100)) throw new CliError(`--max-chips must be a whole number from 1 to 100, got ${maxChips}`);
  const runs = numberOption('runs', values.runs) ?? 50;
  if (!(Number.isInteger(runs) && runs >= 1 && runs <= 100_000)) throw new CliError(`--runs must be a whole number from 1 to 100000, got ${runs}`);
  const proposeFile = values.propose === undefined ? undefined : outputFileOption('propose', values.propose);
  const recipe = loadRecipe(positionals[0] as string, loadMaterialLibrary(values.materials));
  if (proposeFile !== undefined) {
    if (maxChips !== undefined && maxChips < recipe.chips.length) throw new CliError(`--max-chips ${maxChips} is fewer than the ${recipe.chips.length} chips the recipe already uses`);
    const profile = loadSimProfile(values.profile ?? DEFAULT_PROFILE);
    const proposal = proposeStrategy(recipe, { spread: spreadOfProfile(profile), ...(maxChips !== undefined ? { maxChips } : {}) });
    writeOutputFile(proposeFile, proposedRecipeText(positionals[0] as string, proposeFile, proposal));
    io.out(formatProposal(proposal, proposeFile, runs));
    return 0;
  }
  const plan = planRun(recipe, {
    ...(noisePercent !== undefined ? { noise: noisePercent / 100 } : {}),
    ...(sampleRateHz !== undefined ? { sampleRateHz } : {}),
    suggest: values['no-suggest'] ? 'none' : values['whole-run'] ? 'whole-run' : 'per-layer',
  });
  if (values.plot !== undefined) {
    writeOutputFile(plotFileOption(values.plot), plotRun(plan));
    io.err(`wrote ${values.plot}`);
  }
  io.out(values.json ? JSON.stringify(plan) : formatPlan(plan));
  return 0;
}

/** Fixed decimals without a minus on a value that rounds to zero ("-0.000" reads as a sign that is not there). */
function fixed(x: number, decimals: number): string {
  const text = x.toFixed(decimals);
  return /^-0\.?0*$/.test(text) ? text.slice(1) : text;
}

/** The table's columns: header, width, and the cell of a layer (right-aligned unless `left`). */
const COLUMNS: { head: string; width: number; left?: boolean; cell: (l: LayerPlan) => string }[] = [
  { head: '#', width: 2, cell: (l) => String(l.number) },
  { head: 'material', width: 8, left: true, cell: (l) => l.material },
  { head: 'target nm', width: 9, cell: (l) => fixed(l.targetNm, 2) },
  { head: 'cut', width: 11, left: true, cell: (l) => CUT_MODE_SHORT[l.cut] },
  { head: 'λ nm', width: 5, cell: (l) => String(l.wavelengthNm) },
  { head: 'chip', width: 7, left: true, cell: (l) => l.chip },
  { head: 'cut %', width: 6, cell: (l) => fixed(l.cutSignal * 100, 2) },
  { head: 'trig %', width: 6, cell: (l) => fixed(l.triggerSignal * 100, 2) },
  { head: 'TPs', width: 3, cell: (l) => String(l.turningPointsBeforeCut) },
  { head: 'swing %', width: 7, cell: (l) => fixed(l.swing * 100, 2) },
  { head: '±nm fit', width: 7, cell: (l) => fixed(l.precisionNm, 3) },
  { head: '±nm stack', width: 9, cell: (l) => fixed(l.stackPrecisionNm, 3) },
  { head: '±nm rule', width: 8, cell: (l) => fixed(l.plainRulePrecisionNm, 3) },
  { head: 'best λ (±%)', width: 11, cell: (l) => (l.suggestion ? `${l.suggestion.wavelengthNm} (${fixed(l.suggestion.precisionPercent, 2)})` : '—') },
  { head: 'time', width: 7, cell: (l) => formatDuration(l.durationS) },
];

const row = (cells: string[]): string =>
  cells
    .map((c, i) => {
      const col = COLUMNS[i] as (typeof COLUMNS)[number];
      return col.left ? c.padEnd(col.width) : c.padStart(col.width);
    })
    .join(' ')
    .trimEnd();

/** What the less obvious columns mean, printed under the table. */
const COLUMN_NOTES = [
  'cut %, trig %: the monitor signal at the target, and when the cut command goes out (the shutter delay before it).',
  'TPs: turning points (extrema of the signal) the layer passes before its cut.',
  '±nm fit: the model fit\'s bound on the cut from the layer\'s own readings (noise alone).',
  '±nm stack: the same with the layer\'s index and the layers below it on the chip uncertain: what the cut can',
  '  really promise, and what the imprecise-cut warning is judged on.',
  '±nm rule: the plain crossing or turning-point rule.',
  'best λ (±%): the monitor wavelength where the fit would cut this layer most precisely (noise alone, % of',
  '  the thickness); a turning-point layer keeps its own. --json gives every figure, with slopes and the crystal\'s.',
];

function formatPlan(plan: RunPlan): string {
  const rows = [
    `${plan.recipe}: layers ${plan.fromLayer}–${plan.fromLayer + plan.layers.length - 1}, ${formatDuration(plan.durationS)} planned; noise ${fixed(plan.noise * 100, 3)} % at ${plan.sampleRateHz} Hz`,
    '',
    row(COLUMNS.map((c) => c.head)),
    ...plan.layers.map((l) => row(COLUMNS.map((c) => c.cell(l)))),
    '',
    ...COLUMN_NOTES,
  ];
  const warnings = plan.layers.flatMap((l) => l.warnings.flatMap((w) => wrap(`layer ${l.number}: ${w.message} [${w.code}]`, 120, '  ', '    ')));
  if (warnings.length > 0) rows.push('', 'Warnings:', ...warnings);
  if (plan.wholeRun) {
    rows.push('', `Whole-run wavelength plan (${plan.wholeRun.changes} changes): ${plan.layers.filter((l) => l.wholeRunWavelengthNm !== undefined).map((l) => `${l.number}:${l.wholeRunWavelengthNm}`).join(' ')}`);
  }
  return rows.join('\n');
}

/** Greedy word wrap to `width` columns, the first line and the continuations indented. */
function wrap(text: string, width: number, firstIndent: string, indent: string): string[] {
  const lines: string[] = [];
  let line = firstIndent;
  for (const word of text.split(' ')) {
    if (line.trim() === '') line += word;
    else if (line.length + 1 + word.length > width) {
      lines.push(line);
      line = indent + word;
    } else line += ` ${word}`;
  }
  lines.push(line);
  return lines;
}

function formatDuration(seconds: number): string {
  const s = Math.round(seconds);
  const h = Math.floor(s / 3600);
  const m = Math.floor((s % 3600) / 60);
  const r = s % 60;
  return h > 0 ? `${h}:${String(m).padStart(2, '0')}:${String(r).padStart(2, '0')}` : `${m}:${String(r).padStart(2, '0')}`;
}

/**
 * The run's predicted signal layer after layer, against the cumulative deposited thickness on
 * the chips: cuts as markers, turning points as ticks, each chip a shaded band (alternately) with
 * its label, and a triangle where the monitor's wavelength changes.
 */
function plotRun(plan: RunPlan): string {
  const x: number[] = [];
  const y: number[] = [];
  const markers: ChartMarker[] = [];
  const points: ChartPoint[] = [];
  const bands: ChartBand[] = [];
  let offset = 0;
  let previous: LayerPlan | undefined;
  let chipStart = 0;
  let chipIndex = 0;
  const closeChip = (at: number, label: string): void => {
    // Every other chip shaded, so that neighbours are told apart; each labelled.
    bands.push({ from: chipStart, to: at, label, shaded: chipIndex % 2 === 0 });
  };
  for (const l of plan.layers) {
    // A new chip starts bare: break the line there.
    if (l.layerOnChip === 1 && previous) {
      x.push(offset);
      y.push(Number.NaN);
      closeChip(offset, previous.chip);
      chipStart = offset;
      chipIndex++;
    }
    // Another wavelength is another signal: break the line there too.
    if (previous && previous.wavelengthNm !== l.wavelengthNm && l.layerOnChip !== 1) {
      x.push(offset);
      y.push(Number.NaN);
    }
    const cutIndex = Math.round(l.chipTargetNm / l.curve.stepNm);
    for (let k = 0; k <= cutIndex && k < l.curve.signal.length; k++) {
      x.push(offset + k * l.curve.stepNm);
      y.push(l.curve.signal[k] as number);
    }
    if (previous && previous.wavelengthNm !== l.wavelengthNm) {
      points.push({ x: offset, y: l.curve.signal[0] as number, shape: 'triangle', label: `${l.wavelengthNm} nm` });
    }
    for (const tp of l.turningPoints) {
      if (tp.thicknessNm <= l.chipTargetNm + 1e-9) points.push({ x: offset + tp.thicknessNm, y: tp.signal, shape: 'tick' });
    }
    offset += l.chipTargetNm;
    markers.push({ x: offset, ...(plan.layers.length <= 30 ? { label: `${l.number}` } : {}) });
    previous = l;
  }
  if (previous) closeChip(offset, previous.chip);
  const signals = new Set(plan.layers.map((l) => (l.signal === 'transmission' ? 'T' : 'R')));
  const wavelengths = new Set(plan.layers.map((l) => l.wavelengthNm));
  const quantity = [...signals].join(' or ');
  const yLabel = wavelengths.size === 1 ? `${quantity} at ${[...wavelengths][0]} nm (%)` : `${quantity} at each layer's monitor wavelength (%)`;
  const legend: ChartLegendEntry[] = [
    { label: 'cut (layer number)', kind: 'marker' },
    { label: 'turning point', kind: 'point', shape: 'tick' },
    ...(points.some((p) => p.shape === 'triangle') ? [{ label: 'monitor wavelength changes', kind: 'point' as const, shape: 'triangle' as const }] : []),
    ...(bands.length > 1 ? [{ label: 'witness chip (a fresh one starts bare)', kind: 'band' as const }] : []),
  ];
  return renderLineChart([{ label: 'predicted monitor signal', x, y }], {
    title: `${plan.recipe}: predicted monitor signal, cuts marked`,
    xLabel: 'Deposited thickness on the witness chips (nm)',
    yLabel,
    yPercent: true,
    width: 1100,
    height: 520,
    markers,
    points,
    legend,
    // One chip needs no band: the whole plot is it.
    ...(bands.length > 1 ? { bands } : {}),
  });
}

/** The recipe file as written, with the proposal's chips and layer settings over it (single-layer keys win over ranges). */
function proposedRecipeText(recipeFile: string, outFile: string, proposal: Proposal): string {
  const raw = readYamlFile(recipeFile) as { design: unknown; layers?: Record<string, Record<string, unknown>>; chips?: Record<string, unknown>[] };
  const layers: Record<string, Record<string, unknown>> = { ...raw.layers };
  for (const c of proposal.changes) {
    if (c.from.cut === c.to.cut && c.from.wavelengthNm === c.to.wavelengthNm) continue;
    layers[String(c.layer)] = { ...layers[String(c.layer)], cut: c.to.cut === 'crystal' ? 'crystal' : 'auto', wavelengthNm: c.to.wavelengthNm };
  }
  // The chips as proposed: the recipe's own entries kept, a new one like the chip it splits.
  const rawChips = raw.chips ?? [{ fromLayer: 1 }];
  const chips = proposal.recipe.chips.map((c) => rawChips.find((r) => r.fromLayer === c.fromLayer) ?? { ...(rawChips.findLast((r) => (r.fromLayer as number) < c.fromLayer) ?? {}), fromLayer: c.fromLayer, label: c.label });
  // A design named by path is found from the new file's folder.
  const design = typeof raw.design === 'string' ? relative(dirname(resolve(outFile)), resolve(dirname(recipeFile), raw.design)) : raw.design;
  const doc = new Document({ ...raw, design, chips, layers });
  doc.commentBefore = ` Proposed by fringe plan --propose from ${recipeFile}: ${proposal.changes.length} layers changed;\n predicted ${predictionWords(proposal.before)} → ${predictionWords(proposal.after)}.`;
  return String(doc);
}

function predictionWords(p: Prediction): string {
  return p.yieldPercent !== null ? `yield ${fixed(p.yieldPercent, 1)} %` : `mean largest |ΔT| ${fixed(100 * (p.meanMaxAbsT ?? Number.NaN), 3)} pp`;
}

function predictionLine(p: Prediction, runs: number): string {
  if (p.yieldPercent === null) return predictionWords(p);
  const range = studyRange(p.yieldPercent, p.samples, runs);
  return `${predictionWords(p)} (${p.samples} sampled runs; a study of ${runs} runs would measure ${fixed(range.low, 0)}–${fixed(range.high, 0)} %, 95 %)`;
}

function formatProposal(p: Proposal, file: string, runs: number): string {
  const what = p.before.yieldPercent !== null ? 'yield' : 'deviation';
  const rows = [
    `${p.plan.recipe}: ${p.changes.length} of ${p.plan.layers.length} layers changed, ${p.recipe.chips.length} chips; wrote ${file}`,
    `predicted ${what}, the model fit cutting (the plan's error model: optical cuts by their stack figures, crystal cuts by the`,
    '  tooling, the film indices spread as the profile says):',
    `  before: ${predictionLine(p.before, runs)}`,
    `  after:  ${predictionLine(p.after, runs)}`,
  ];
  if (p.plainBefore.yieldPercent !== null) {
    rows.push(
      'predicted yield, the plain rules cutting (each sampled run cut as the rules do on its chip as it grew):',
      `  before: ${predictionLine(p.plainBefore, runs)}`,
      `  after:  ${predictionLine(p.plainAfter, runs)}`,
    );
  }
  if (p.keptOriginal) rows.push('  the search\'s best was not better by the exact prediction: the recipe is kept as it is');
  if (p.changes.length > 0) rows.push('');
  for (const c of p.changes) {
    const setting = (s: Proposal['changes'][number]['from']): string => `${CUT_MODE_WORDS[s.cut]}${s.cut === 'crystal' ? '' : ` at ${s.wavelengthNm} nm`} on ${s.chip}`;
    rows.push(...wrap(`layer ${c.layer}: ${setting(c.from)} → ${setting(c.to)}: ${c.reason}`, 120, '  ', '    '));
  }
  if (p.flagged.length > 0) {
    rows.push('', `Layers whose stack figure is above ${FLAG_PERCENT} % of n·d in the recipe:`);
    for (const f of p.flagged) {
      const now = f.afterPercent === null ? 'cut on the crystal in the proposal' : `${fixed(f.afterPercent, 2)} % in the proposal`;
      const verdict = f.met
        ? 'met'
        : f.keptTurn
          ? 'kept on its turning point, which makes up for the layers below (the figure, a fit\'s, overstates its error on a chain of turns)'
          : `not met: no optical setting tried does better than ${fixed(f.bestOpticalPercent, 2)} %${f.bestOpticalPercent <= FLAG_PERCENT ? ' (which would meet it, but lowers a predicted yield: the fit\'s or the plain rules\')' : ''}`;
      rows.push(...wrap(`layer ${f.layer}: ${fixed(f.beforePercent, 2)} % → ${now}; ${verdict}`, 120, '  ', '    '));
    }
  }
  rows.push('', 'Check the proposal with fringe study (strategies fit and plain) before relying on it.');
  return rows.join('\n');
}
