// The material library config/materials.yaml: its format, its derived Z-ratios and its indices
// against published values.
import { readFileSync } from 'node:fs';
import { parse } from 'yaml';
import { describe, expect, it } from 'vitest';
import { MaterialLibrarySchema, type Material } from '../../src/model/optics/material.ts';
import { dispersionRangeNm, indexAt, type IndexNK } from '../../src/model/optics/dispersion.ts';

const library = MaterialLibrarySchema.parse(
  parse(readFileSync(new URL('../../config/materials.yaml', import.meta.url), 'utf8')),
);
const entries = Object.entries(library.materials);

function material(name: string): Material {
  const m = library.materials[name];
  if (m === undefined) throw new Error(`material ${name} missing from the library`);
  return m;
}

function nkAt(name: string, wavelengthNm: number): IndexNK {
  return indexAt({ n: 0, k: 0 }, material(name).dispersion, wavelengthNm);
}

const FILMS = ['SiO2', 'TiO2', 'Ta2O5', 'Nb2O5', 'HfO2', 'Al2O3', 'ZrO2', 'MgF2', 'ZnS'];
const BULK = ['N-BK7', 'FusedSilica', 'Sapphire'];

describe('material library format', () => {
  it('holds at least 14 entries, among them every named film, a metal and the substrates', () => {
    expect(entries.length).toBeGreaterThanOrEqual(14);
    for (const name of [...FILMS, ...BULK]) expect(library.materials, name).toHaveProperty([name]);
    expect(['Al', 'Ag'].some((name) => name in library.materials)).toBe(true);
  });

  it('marks deposited films as film and glasses/crystals as bulk', () => {
    for (const name of FILMS) expect(material(name).form, name).toBe('film');
    for (const name of BULK) expect(material(name).form, name).toBe('bulk');
  });

  it('tabulates the metal films over at least 400–1100 nm', () => {
    for (const name of ['Al', 'Ag'].filter((n) => n in library.materials)) {
      const d = material(name).dispersion;
      expect(d.model, name).toBe('table');
      const [lo, hi] = dispersionRangeNm(d);
      expect(lo, name).toBeLessThanOrEqual(400);
      expect(hi, name).toBeGreaterThanOrEqual(1080); // "roughly 400–1100 nm"
    }
  });
});

describe('Z-ratio', () => {
  // AT-cut quartz ρ_q = 2.648 g/cm³, μ_q = 2.947e11 g cm⁻¹ s⁻² = 29.47 GPa
  // (C. Lu and O. Lewis, J. Appl. Phys. 43, 4385 (1972); physics-notes).
  const RHO_Q_G_PER_CM3 = 2.648;
  const MU_Q_GPA = 29.47;

  it.each(entries)('%s: zRatio = sqrt(ρ_q μ_q / (ρ_f μ_f)) to 0.5 % (Lu & Lewis 1972)', (_name, m) => {
    const derived = Math.sqrt((RHO_Q_G_PER_CM3 * MU_Q_GPA) / (m.densityGPerCm3 * m.shearModulusGPa));
    expect(Math.abs(m.zRatio / derived - 1)).toBeLessThanOrEqual(0.005);
  });
});

describe('substrate indices', () => {
  it('N-BK7 n_d at 587.5618 nm is 1.51680', () => {
    expect(Math.abs(nkAt('N-BK7', 587.5618).n - 1.5168)).toBeLessThanOrEqual(5e-6); // Schott datasheet n_d
  });

  it.each([
    [550, 1.51852], // physics-notes, derived from the Schott Sellmeier
    [632.8, 1.51509], // physics-notes, derived from the Schott Sellmeier
    [1064, 1.50663], // physics-notes, derived from the Schott Sellmeier
  ])('N-BK7 n(%f nm) = %f', (wavelengthNm, expected) => {
    expect(Math.abs(nkAt('N-BK7', wavelengthNm).n - expected)).toBeLessThanOrEqual(5e-5);
  });

  it.each([
    [587.5618, 1.45846], // Malitson, J. Opt. Soc. Am. 55, 1205 (1965); physics-notes derived
    [1064, 1.44963], // Malitson, J. Opt. Soc. Am. 55, 1205 (1965); physics-notes derived
  ])('fused silica n(%f nm) = %f', (wavelengthNm, expected) => {
    expect(Math.abs(nkAt('FusedSilica', wavelengthNm).n - expected)).toBeLessThanOrEqual(5e-5);
  });

  it('sapphire ordinary index near 1.768 at 587.6 nm', () => {
    // n_o ≈ 1.768 for sapphire at the d line (from memory); a wrong C convention moves it by > 0.01
    expect(Math.abs(nkAt('Sapphire', 587.5618).n - 1.768)).toBeLessThanOrEqual(1e-3);
  });
});

describe('thin-film indices at 550 nm', () => {
  it.each([
    ['SiO2', 1.4791], // IAD SiO2: Gao, Lemarchand, Lequime, J. Eur. Opt. Soc. RP 8, 13010 (2013)
    ['Ta2O5', 2.1573], // IAD Ta2O5: Gao, Lemarchand, Lequime, Opt. Express 20, 15734 (2012)
    ['Nb2O5', 2.3603], // sputtered Nb2O5: Lemarchand 2013, refractiveindex.info database
    ['HfO2', 1.9021], // e-beam HfO2 Cauchy: Al-Kuhaili, Opt. Mater. 27, 383 (2004)
    ['ZnS', 2.386], // e-beam ZnS: Amotchkina, Trubetskov, Hahner, Pervak, Appl. Opt. 59, A40 (2020)
    ['Al2O3', 1.6298], // ALD Al2O3: Zhukovsky et al., Phys. Rev. Lett. 115, 177402 (2015)
    ['MgF2', 1.38], // evaporated MgF2 ≈ 1.38 (physics-notes, from memory)
  ])('%s n(550) = %f', (name, expected) => {
    expect(Math.abs(nkAt(name, 550).n - expected)).toBeLessThanOrEqual(2e-4);
  });

  it('Ta2O5 k(550) = 2.1e-5', () => {
    // IAD Ta2O5: Gao, Lemarchand, Lequime, Opt. Express 20, 15734 (2012)
    expect(Math.abs(nkAt('Ta2O5', 550).k - 2.1e-5)).toBeLessThanOrEqual(2e-6);
  });

  it('TiO2 (IAD) lies in 2.3–2.4 at 550 nm and absorbs more in the blue than in the red', () => {
    // IAD TiO2 about 2.3–2.4 (physics-notes); blue absorption falling toward the red (from memory)
    const at550 = nkAt('TiO2', 550);
    expect(at550.n).toBeGreaterThanOrEqual(2.3);
    expect(at550.n).toBeLessThanOrEqual(2.4);
    const k400 = nkAt('TiO2', 400).k;
    const k700 = nkAt('TiO2', 700).k;
    expect(k400).toBeGreaterThan(at550.k);
    expect(at550.k).toBeGreaterThan(k700);
    expect(k400).toBeLessThan(1e-3); // "slight absorption", k ~ 1e-4 near 400 nm (from memory)
  });
});

describe('every model over its valid range', () => {
  it.each(entries.filter(([, m]) => m.dispersion.model === 'table'))(
    '%s: the table covers validRangeNm',
    (_name, m) => {
      const [lo, hi] = dispersionRangeNm(m.dispersion);
      expect(lo).toBeLessThanOrEqual(m.validRangeNm[0]);
      expect(hi).toBeGreaterThanOrEqual(m.validRangeNm[1]);
    },
  );

  it.each(entries)('%s: finite n > 0 and k ≥ 0 on a 10 nm grid', (_name, m) => {
    const [lo, hi] = m.validRangeNm;
    const out: IndexNK = { n: 0, k: 0 };
    const grid: number[] = [];
    for (let w = lo; w < hi; w += 10) grid.push(w);
    grid.push(hi);
    for (const wavelengthNm of grid) {
      indexAt(out, m.dispersion, wavelengthNm);
      expect(Number.isFinite(out.n) && out.n > 0, `n at ${wavelengthNm} nm`).toBe(true);
      expect(Number.isFinite(out.k) && out.k >= 0, `k at ${wavelengthNm} nm`).toBe(true);
    }
  });
});
