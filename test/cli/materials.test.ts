// fringe materials [NAME]: the library's entries, each one whole with its sources, a plot of n and k.
import { mkdtempSync, readFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { describe, expect, it } from 'vitest';
import { loadMaterialLibrary } from '../../src/config/load-design.ts';
import { runCli as run } from '../support/run-cli.ts';

const library = loadMaterialLibrary();
const names = Object.keys(library.materials);
const dir = mkdtempSync(join(tmpdir(), 'fringe-materials-'));

describe('fringe materials', () => {
  it('lists every entry of the library with its range and n, k', async () => {
    const r = await run('materials');
    expect(r.code, r.err).toBe(0);
    const rows = r.out.split('\n').slice(1, 1 + names.length);
    expect(rows.map((row) => row.split(/\s+/)[0])).toEqual(names);
    // N-BK7 at 550 nm: n = 1.51852 (Schott N-BK7 datasheet Sellmeier; n_e = 1.51872 at 546.1 nm).
    expect(rows.find((row) => row.startsWith('N-BK7'))).toMatch(/^N-BK7\s+bulk 300–2500\s+550\s+1\.5185\s+0\s+2\.51\s+0\.956\s+sellmeier$/);
    expect(r.out).toContain(`${names.length} entries`);
  });

  it('shows one entry whole: dispersion, range, every source as the library states it', async () => {
    const r = await run('materials', 'TiO2');
    expect(r.code, r.err).toBe(0);
    const m = library.materials.TiO2;
    if (!m) throw new Error('the shipped library has TiO2');
    expect(r.out).toContain(`TiO2: ${m.description}`);
    expect(r.out).toContain(`data range      ${m.validRangeNm[0]}–${m.validRangeNm[1]} nm`);
    expect(r.out).toMatch(/dispersion {6}Cauchy \(λ in µm\): n = /);
    for (const source of Object.values(m.sources)) expect(r.out).toContain(source);
    // The table of n across the range starts at its first wavelength.
    expect(r.out).toMatch(new RegExp(`\\n\\s+${m.validRangeNm[0]}\\.0\\s+\\d\\.\\d{5}`));
    const json = await run('materials', 'TiO2', '--json');
    expect(JSON.parse(json.out)).toEqual({ TiO2: m });
  });

  it('refuses an unknown name in one sentence, suggesting only near names', async () => {
    const typo = await run('materials', 'TiO3');
    expect(typo.code).toBe(1);
    expect(typo.err.trim()).toBe('fringe materials: no material "TiO3" in the library; nearest: TiO2 (fringe materials lists them)');
    const far = await run('materials', 'Unobtainium');
    expect(far.code).toBe(1);
    expect(far.err.trim()).toBe('fringe materials: no material "Unobtainium" in the library (fringe materials lists them)');
    const two = await run('materials', 'TiO2', 'SiO2');
    expect(two.code).toBe(2);
  });

  it('--plot draws n and k of one entry, or n of every entry, and refuses a name not ending in .svg', async () => {
    const one = join(dir, 'ag.svg');
    const r = await run('materials', 'Ag', '--plot', one);
    expect(r.code, r.err).toBe(0);
    const svg = readFileSync(one, 'utf8');
    expect(svg).toMatch(/^<\?xml version="1\.0" encoding="UTF-8"\?>\n<svg xmlns="http:\/\/www\.w3\.org\/2000\/svg"/);
    expect(svg).toContain('Ag: refractive index n');
    expect(svg).toContain('Ag: extinction coefficient k');
    // Exactly one XML declaration, and the two charts' clip paths distinct.
    expect(svg.match(/<\?xml/g)).toHaveLength(1);
    expect(svg).toContain('id="materials-n-clip"');
    expect(svg).toContain('id="materials-k-clip"');
    const all = join(dir, 'all.svg');
    expect((await run('materials', '--plot', all)).code).toBe(0);
    const allSvg = readFileSync(all, 'utf8');
    for (const name of names) expect(allSvg).toContain(`>${name}<`);
    const bad = await run('materials', '--plot', join(dir, 'n.png'));
    expect(bad.code).toBe(2);
    expect(bad.err).toMatch(/--plot writes an SVG file and its name must end in \.svg/);
  });
});
