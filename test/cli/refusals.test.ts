// What a new user gets for the usual mistakes: one sentence that says what is wrong and what to do.
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { nearestNames } from '../../src/config/validation.ts';
import { runCli as run } from '../support/run-cli.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const ar4Recipe = join(root, 'config/recipes/ar4-visible.yaml');
const ar4Design = join(root, 'config/designs/ar4-visible.yaml');
const dir = mkdtempSync(join(tmpdir(), 'fringe-refusals-'));
const write = (name: string, text: string): string => {
  const file = join(dir, name);
  writeFileSync(file, text);
  return file;
};
const oneLine = (text: string): string[] => text.trim().split('\n');

describe('empty files', () => {
  it('a configuration file of nothing, blank lines or a lone "---" says it is empty', async () => {
    for (const [name, text] of [['nothing.yaml', ''], ['blank.yaml', '\n\n  \n'], ['dashes.yaml', '---\n'], ['dashes-comment.yaml', '--- # nothing yet\n']] as const) {
      const file = write(name, text);
      for (const argv of [['spectrum', file], ['plan', file], ['spectrum', ar4Design, '--materials', file]]) {
        const r = await run(...argv);
        expect(r.code, `${argv.join(' ')}: ${r.err}`).toBe(1);
        expect(oneLine(r.err), argv.join(' ')).toEqual([`fringe ${argv[0] as string}: ${file}: the file is empty (or holds only comments)`]);
      }
    }
  });

  it('an empty journal says it is empty', async () => {
    const file = write('journal.ndjson', '');
    for (const argv of [['replay', file], ['export', file, '--csv']]) {
      const r = await run(...argv);
      expect(r.code).toBe(1);
      expect(oneLine(r.err)).toEqual([`fringe ${argv[0] as string}: ${file} is empty: it holds no journal`]);
    }
  });
});

describe('a design and a recipe mistaken for each other', () => {
  it('a design where a recipe is expected says so and which command takes it', async () => {
    for (const command of ['plan', 'simulate']) {
      const r = await run(command, ar4Design);
      expect(r.code).toBe(1);
      expect(oneLine(r.err)).toHaveLength(1);
      expect(r.err).toMatch(/this is a design, not a recipe: `fringe spectrum` takes a design/);
      expect(r.err).toMatch(/names its design under `design:`/);
    }
  });

  it('a recipe where a design is expected says so and names the design it holds', async () => {
    const r = await run('spectrum', ar4Recipe);
    expect(r.code).toBe(1);
    expect(oneLine(r.err)).toEqual([
      `fringe spectrum: ${ar4Recipe}: this is a recipe, not a design: plan, simulate, study, run and demo take a recipe; \`fringe spectrum\` takes the design it names (its \`design:\` names ../designs/ar4-visible.yaml)`,
    ]);
  });

  it('a design file the recipe names that fails is told as the recipe’s design: key', async () => {
    const recipeText = readFileSync(ar4Recipe, 'utf8');
    const missing = write('missing-design.yaml', recipeText.replace(/^design: .*$/m, 'design: no-such-design.yaml'));
    const r = await run('plan', missing);
    expect(r.code).toBe(1);
    expect(oneLine(r.err)).toEqual([`fringe plan: ${missing}: design: the design file "no-such-design.yaml" (${join(dir, 'no-such-design.yaml')}): cannot be read: no such file`]);
    // A design with a bad field: its path within the design follows.
    write('typo-design.yaml', readFileSync(ar4Design, 'utf8').replaceAll('TiO2', 'TiO3'));
    const typo = write('typo-recipe.yaml', recipeText.replace(/^design: .*$/m, 'design: typo-design.yaml'));
    const t = await run('plan', typo);
    expect(t.code).toBe(1);
    expect(t.err).toMatch(/- design: the design file "typo-design.yaml" \(.*typo-design.yaml\), layers\[0\]\.material: unknown material "TiO3"; nearest known: TiO2\n/);
  });
});

describe('unknown materials', () => {
  it('suggests names only when they are near', async () => {
    const far = write('far.yaml', readFileSync(ar4Design, 'utf8').replaceAll('TiO2', 'Unobtainium'));
    const r = await run('spectrum', far);
    expect(r.code).toBe(1);
    expect(r.err).toMatch(/unknown material "Unobtainium"; no known name is near it \(fringe materials lists the library\)/);
    expect(r.err).not.toMatch(/nearest known/);
    expect(nearestNames('Unobtainium', ['Vacuum', 'Air', 'Au'])).toEqual([]);
    expect(nearestNames('SiO', ['SiO2', 'Si', 'TiO2', 'MgF2'])).toEqual(['Si', 'SiO2']);
    expect(nearestNames('ta2o5', ['Ta2O5', 'TiO2'])).toEqual(['Ta2O5']);
  });
});

describe('a bare substrate', () => {
  it('is a design for spectrum (no layers, or layers: []), and a recipe refuses it', async () => {
    // N-BK7 at 550 nm: n = 1.51852 (Schott N-BK7 datasheet Sellmeier; n_e = 1.51872 at 546.1 nm); one face R0 = ((n−1)/(n+1))² = 4.239 %,
    // both faces of an incoherent slab R = 2R0/(1+R0) = 8.133 % (derived, Fresnel; Macleod ch. 2).
    const n = 1.51852;
    const r0 = ((n - 1) / (n + 1)) ** 2;
    for (const text of ['formatVersion: 1\nname: bare\nsubstrate: { material: N-BK7 }\n', 'formatVersion: 1\nname: bare\nsubstrate: { material: N-BK7 }\nlayers: []\n']) {
      const file = write('bare.yaml', text);
      const r = await run('spectrum', file, '--wavelength', '550', '--json');
      expect(r.code, r.err).toBe(0);
      const spectrum = JSON.parse(r.out) as { R: number[]; T: number[] };
      expect(spectrum.R[0]).toBeCloseTo((2 * r0) / (1 + r0), 4);
      expect((spectrum.R[0] as number) + (spectrum.T[0] as number)).toBeCloseTo(1, 12);
    }
    const recipe = write('bare-recipe.yaml', readFileSync(ar4Recipe, 'utf8').replace(/^design: .*$/m, 'design: bare.yaml'));
    const p = await run('plan', recipe);
    expect(p.code).toBe(1);
    expect(oneLine(p.err)).toEqual([`fringe plan: ${recipe}: design: the design has no layers, a bare substrate: a recipe deposits at least one (the bare substrate is for fringe spectrum)`]);
  });
});

describe('inline materials in a recipe', () => {
  it('are named n=… (n=…,k=… when absorbing): that is their key in process, and process.default covers the rest', async () => {
    const design = write(
      'inline-design.yaml',
      'formatVersion: 1\nname: inline\nsubstrate: { material: N-BK7 }\nreferenceWavelengthNm: 550\nlayers:\n  - { material: { n: 2.1 }, quarterWaves: 1 }\n  - { material: { n: 1.45, k: 0.001 }, quarterWaves: 1 }\n  - { material: SiO2, quarterWaves: 1 }\n',
    );
    const recipe = write(
      'inline-recipe.yaml',
      `formatVersion: 1\nname: inline\ndesign: ${design}\nprocess:\n  "n=2.1": { rateNmPerS: 0.3 }\n  "n=1.45,k=0.001": { rateNmPerS: 0.7 }\n  default: { rateNmPerS: 0.9 }\ndefaults: { cut: crystal }\n`,
    );
    const r = await run('plan', recipe, '--json', '--no-suggest');
    expect(r.code, r.err).toBe(0);
    const plan = JSON.parse(r.out) as { layers: { material: string; rateNmPerS: number }[] };
    expect(plan.layers.map((l) => [l.material, l.rateNmPerS])).toEqual([
      ['n=2.1', 0.3],
      ['n=1.45,k=0.001', 0.7],
      ['SiO2', 0.9],
    ]);
  });
});
