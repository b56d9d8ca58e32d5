// The plan command through main(), with output captured.
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { runCli as run } from '../support/run-cli.ts';
import type { LayerPlan, RunPlan } from '../../src/model/plan/plan.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const edge = join(root, 'config/recipes/edge-longpass-visible.yaml');
const mirror = join(root, 'config/recipes/mirror-1064.yaml');
const ar4 = join(root, 'config/recipes/ar4-visible.yaml');

async function planJson(...argv: string[]): Promise<RunPlan> {
  const r = await run('plan', ...argv, '--json');
  expect(r.code, r.err).toBe(0);
  return JSON.parse(r.out) as RunPlan;
}

describe('fringe plan', () => {
  it('--json prints one object with a layer entry for every layer of the design', async () => {
    const plan = await planJson(edge);
    // config/designs/edge-longpass-visible.yaml lists 27 layers.
    expect(plan.layers).toHaveLength(27);
    expect(plan.layers.map((l) => l.number)).toEqual(Array.from({ length: 27 }, (_, i) => i + 1));
    expect(plan.recipe).toBe('Edge filter 600 nm, levels on two chips');
    expect(plan.fromLayer).toBe(1);
    // The recipe's monitor: 0.1 % noise, 10 readings a second.
    expect(plan.noise).toBeCloseTo(0.001, 15);
    expect(plan.sampleRateHz).toBe(10);
    for (const l of plan.layers) {
      expect(l.curve.signal.length).toBeGreaterThan(2);
      expect(Number.isFinite(l.precisionNm)).toBe(true);
      // Optical cuts get a suggested wavelength; the recipe's crystal cuts (1, 13, 23) none.
      expect(l.suggestion !== undefined, `layer ${l.number}`).toBe(l.cut === 'level' || l.cut === 'turning-point');
    }
  });

  it('prints a table with a row for every layer, and the warnings with their codes', async () => {
    const r = await run('plan', edge);
    expect(r.code, r.err).toBe(0);
    const lines = r.out.split('\n');
    expect(lines[0]).toMatch(/^Edge filter 600 nm, levels on two chips: layers 1–27/);
    for (let n = 1; n <= 27; n++) {
      const row = lines.find((line) => new RegExp(`^\\s*${n} +(SiO2|TiO2) `).test(line));
      expect(row, `layer ${n}`).toBeDefined();
    }
    // The edge recipe steers round the plan's warnings but one (layer 8's figure with the layers
    // below); the mirror's last layers keep theirs.
    expect(r.out.slice(r.out.indexOf('Warnings:')).match(/\[[a-z-]+\]/g)).toEqual(['[imprecise-cut]']);
    const m = await run('plan', mirror, '--no-suggest');
    expect(m.out).toContain('Warnings:');
    expect(m.out).toMatch(/layer 19: [^[]*\[small-swing\]/);
  });

  it('fits its table and warnings in 120 columns, explains the terse columns under it, and prints no −0', async () => {
    for (const file of [edge, mirror, ar4]) {
      const r = await run('plan', file);
      const lines = r.out.split('\n');
      for (const line of lines) expect(line.length, line).toBeLessThanOrEqual(120);
      expect(r.out).not.toMatch(/-0\.0*(?![0-9]*[1-9])\b/);
      const header = lines.findIndex((l) => l.trimStart().startsWith('# material'));
      const notes = lines.slice(header).join('\n');
      expect(notes).toMatch(/^±nm stack: the same with the layer's index and the layers below it on the chip uncertain/m);
      expect(notes).toMatch(/^TPs: turning points \(extrema of the signal\) the layer passes before its cut/m);
      expect(notes).toMatch(/^best λ \(±%\): the monitor wavelength where the fit would cut this layer most precisely/m);
    }
  });

  it('--plot writes an SVG of the run', async () => {
    const plot = join(mkdtempSync(join(tmpdir(), 'fringe-plan-plot-')), 'run.svg');
    const r = await run('plan', edge, '--plot', plot, '--no-suggest');
    expect(r.code, r.err).toBe(0);
    expect(r.err).toContain(`wrote ${plot}`);
    const svg = readFileSync(plot, 'utf8');
    expect(svg.startsWith('<?xml') || svg.startsWith('<svg')).toBe(true);
    expect(svg).toContain('</svg>');
    expect(svg).toContain('Edge filter 600 nm');
    // A legend for what the marks mean, the chips told apart, wavelength changes marked, and an
    // axis that names the quantity (the edge recipe watches T, at 600 nm and at 480 and 490 nm).
    const legend = [...svg.matchAll(/class="legend-label"[^>]*>([^<]+)</g)].map((m) => m[1]);
    expect(legend).toEqual(['predicted monitor signal', 'cut (layer number)', 'turning point', 'monitor wavelength changes', 'witness chip (a fresh one starts bare)']);
    expect([...svg.matchAll(/class="band-label"[^>]*>([^<]+)</g)].map((m) => m[1])).toEqual(['chip A', 'chip B']);
    expect([...svg.matchAll(/class="point-label"[^>]*>([^<]+)</g)].map((m) => m[1])).toEqual(['480 nm', '600 nm', '490 nm', '600 nm']);
    expect(svg).toMatch(/class="axis-label axis-label-y"[^>]*>T at each layer&apos;s monitor wavelength \(%\)</);
    const mirrorPlot = join(mkdtempSync(join(tmpdir(), 'fringe-plan-plot-')), 'mirror.svg');
    await run('plan', mirror, '--plot', mirrorPlot, '--no-suggest');
    expect(readFileSync(mirrorPlot, 'utf8')).toMatch(/class="axis-label axis-label-y"[^>]*>T at 1064 nm \(%\)</);
  });

  it('--plot refuses a file name not ending in .svg, before any work', async () => {
    const r = await run('plan', edge, '--plot', join(tmpdir(), 'run.png'));
    expect(r.code).toBe(2);
    expect(r.err.trim()).toMatch(/^.*--plot writes an SVG drawing: name a file ending in \.svg, got ".*run\.png"$/);
  });

  it('--noise 0.2 raises every optical fit precision by more than 1× and at most 2×; the plain rules scale exactly', async () => {
    for (const file of [edge, ar4]) {
      const low = await planJson(file, '--noise', '0.1', '--no-suggest');
      const high = await planJson(file, '--noise', '0.2', '--no-suggest');
      expect(low.noise).toBeCloseTo(0.001, 15);
      expect(high.noise).toBeCloseTo(0.002, 15);
      const ratios: number[] = [];
      low.layers.forEach((a: LayerPlan, i) => {
        const b = high.layers[i] as LayerPlan;
        if (a.cut === 'level' || a.cut === 'turning-point') {
          // Fit bound: the data information falls 4×, the priors' (gain, offset, rate) stays, so
          // the bound grows by at most 2× (exactly 2× only when the priors are negligible).
          const ratio = b.precisionNm / a.precisionNm;
          expect(ratio, `layer ${a.number}`).toBeGreaterThan(1);
          expect(ratio, `layer ${a.number}`).toBeLessThanOrEqual(2 + 1e-9);
          ratios.push(ratio);
          // Crossing rule σ/|S′| scales as σ; turning-point rule √(2kσ/|S″|) as √σ (physics-notes).
          const rule = b.plainRulePrecisionNm / a.plainRulePrecisionNm;
          expect(rule).toBeCloseTo(a.cut === 'level' ? 2 : Math.SQRT2, 9);
        } else {
          // Crystal cuts do not depend on the optical noise.
          expect(b.precisionNm).toBe(a.precisionNm);
        }
      });
      // The AR recipe cuts two layers optically, the edge filter 24.
      expect(ratios.length).toBeGreaterThanOrEqual(2);
      if (file === edge) {
        // On this recipe the priors matter: some layers gain far less than 2× (down to ≈ 1.05).
        expect(Math.min(...ratios)).toBeLessThan(1.5);
        expect(Math.max(...ratios)).toBeGreaterThan(1.99);
      }
    }
  });

  it('refuses bad options with one line and exit code 2', async () => {
    const cases: [string[], RegExp][] = [
      [[], /exactly one RECIPE/],
      [[edge, ar4], /exactly one RECIPE/],
      [[edge, '--noise', 'abc'], /--noise expects a number/],
      [[edge, '--noise', '0'], /--noise must be a percentage above 0 and below 100/],
      [[edge, '--noise', '100'], /--noise must be a percentage/],
      [[edge, '--sample-rate', '0'], /--sample-rate must be above 0/],
      [[edge, '--sample-rate=-5'], /--sample-rate must be above 0/],
      [[edge, '--sample-rate', '2e5'], /at most 100000 Hz/],
      [[edge, '--whole-run', '--no-suggest'], /--whole-run needs the wavelength search/],
      [[edge, '--nonsense'], /Unknown option/],
      [[edge, '--plot'], /--plot/],
    ];
    for (const [args, message] of cases) {
      const r = await run('plan', ...args);
      expect(r.code, args.join(' ')).toBe(2);
      expect(r.err, args.join(' ')).toMatch(message);
      expect(r.err.trim().split('\n'), args.join(' ')).toHaveLength(1);
      expect(r.out).toBe('');
    }
  });

  it('refuses a missing or invalid recipe with exit code 1', async () => {
    const missing = await run('plan', '/nonexistent/recipe.yaml');
    expect(missing.code).toBe(1);
    expect(missing.err).toMatch(/no such file/);
    const file = join(mkdtempSync(join(tmpdir(), 'fringe-plan-')), 'recipe.yaml');
    writeFileSync(file, `formatVersion: 1\nname: bad\ndesign: ${JSON.stringify(join(root, 'config/designs/ar4-visible.yaml'))}\nlayers:\n  "9": { cut: level }\n`);
    const bad = await run('plan', file);
    expect(bad.code).toBe(1);
    expect(bad.err).toMatch(/layers\.9: the design has layers 1–4/);
  });
});
