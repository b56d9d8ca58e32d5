// The spectrum command through main(), with output captured, and once through the real bin.
import { execFileSync } from 'node:child_process';
import { mkdtempSync, readFileSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { runCli as run } from '../support/run-cli.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));

function tempDesign(text: string): string {
  const file = join(mkdtempSync(join(tmpdir(), 'fringe-cli-')), 'design.yaml');
  writeFileSync(file, text);
  return file;
}

// A single quarter-wave of n = 1.38 on a semi-infinite n = 1.52: R = ((n0·ns − n1²)/(n0·ns + n1²))²
// = 1.2601 % at the reference wavelength (Macleod, Thin-Film Optical Filters; physics-notes).
const quarterWave = `formatVersion: 1
name: one quarter-wave
substrate: { material: { n: 1.52 }, back: none }
referenceWavelengthNm: 550
layers:
  - { material: { n: 1.38 }, quarterWaves: 1 }
`;

describe('fringe spectrum', () => {
  it('--json prints exactly the four arrays', async () => {
    const r = await run('spectrum', tempDesign(quarterWave), '--from', '500', '--to', '600', '--step', '50', '--json');
    expect(r.code).toBe(0);
    const parsed = JSON.parse(r.out) as Record<string, number[]>;
    expect(Object.keys(parsed)).toEqual(['wavelengthNm', 'R', 'T', 'A']);
    expect(parsed.wavelengthNm).toEqual([500, 550, 600]);
    expect(parsed.R?.[1]).toBeCloseTo(0.012600790214630288, 12);
    for (let i = 0; i < 3; i++) expect((parsed.R?.[i] ?? 0) + (parsed.T?.[i] ?? 0) + (parsed.A?.[i] ?? 0)).toBeCloseTo(1, 12);
  });

  it('prints a table with the band mean, and CSV with a header', async () => {
    const file = tempDesign(quarterWave);
    const table = await run('spectrum', file, '--wavelength', '550');
    expect(table.code).toBe(0);
    expect(table.out).toMatch(/550\s+1\.2601\s+98\.7399\s+0\.0000/);
    const csv = await run('spectrum', file, '--from', '540', '--to', '560', '--step', '10', '--csv');
    const lines = csv.out.trim().split('\n');
    expect(lines[0]).toBe('wavelength_nm,R,T,A');
    expect(lines).toHaveLength(4);
  });

  it('writes an SVG plot', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-plot-'));
    const plot = join(dir, 'r.svg');
    const r = await run('spectrum', tempDesign(quarterWave), '--plot', plot, '--json');
    expect(r.code).toBe(0);
    const svg = readFileSync(plot, 'utf8');
    expect(svg.startsWith('<?xml') || svg.startsWith('<svg')).toBe(true);
    expect(svg).toContain('one quarter-wave');
  });

  it('marks the tolerances on the table and gives the verdict with the worst margin', async () => {
    // The quarter-wave's R = 1.2601 % at 550 nm (above); at 500 and 600 nm it is higher.
    const file = tempDesign(`${quarterWave}tolerances:
  - { fromNm: 540, toNm: 560, quantity: R, atMostPercent: 1.3 }
  - { fromNm: 550, toNm: 550, quantity: T, atLeastPercent: 99 }
  - { fromNm: 550, toNm: 550, quantity: R, atMostPercent: 5, angleDeg: 45, pol: s }
`);
    const r = await run('spectrum', file, '--from', '500', '--to', '600', '--step', '50');
    expect(r.code).toBe(0);
    const rows = r.out.split('\n');
    expect(rows.find((l) => l.trim().startsWith('500'))).not.toMatch(/#1/);
    expect(rows.find((l) => l.trim().startsWith('550'))).toMatch(/#1 ok \+0\.040 pp; #2 MISS −0\.260 pp/);
    expect(r.out).toMatch(/Tolerances: FAIL, 2 of 3 met; worst margin −0\.260 pp/);
    expect(r.out).toMatch(/2\. T ≥ 99 % at 550 nm, 0°, unpolarised: MISSED, worst margin −0\.260 pp at 550 nm \(T 98\.740 %\)/);
    // The third is judged at its own angle and polarisation, and says so.
    expect(r.out).toMatch(/3\. R ≤ 5 % at 550 nm, 45°, s-polarised: met.*judged under its own conditions/);
    const json = JSON.parse((await run('spectrum', file, '--wavelength', '550', '--json')).out) as { tolerances: { pass: boolean; each: { pass: boolean }[] } };
    expect(json.tolerances.pass).toBe(false);
    expect(json.tolerances.each.map((t) => t.pass)).toEqual([true, false, true]);
  });

  it('--front shows the coated face alone: bare glass reflects R_f, not 2R_f/(1+R_f)', async () => {
    // Fresnel, ((1.52 − 1)/2.52)² = 4.2580 %; with the incoherent back face 8.1683 % (derived).
    const glass = tempDesign(`formatVersion: 1
name: bare glass
substrate: { material: { n: 1.52 } }
layers: [{ material: { n: 1.52 }, thicknessNm: 1 }]
`);
    const part = JSON.parse((await run('spectrum', glass, '--wavelength', '550', '--json')).out) as { R: number[] };
    const front = JSON.parse((await run('spectrum', glass, '--wavelength', '550', '--json', '--front')).out) as { R: number[] };
    expect(front.R[0]).toBeCloseTo(((1.52 - 1) / 2.52) ** 2, 12);
    expect(part.R[0]).toBeCloseTo((2 * ((1.52 - 1) / 2.52) ** 2) / (1 + ((1.52 - 1) / 2.52) ** 2), 12);
  });

  it('--plot draws R and T each scaled to its data with the tolerances, and prints the table only with --table', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-plot-'));
    const plot = join(dir, 'ar.svg');
    const ar = join(root, 'config/designs/ar4-visible.yaml');
    const r = await run('spectrum', ar, '--front', '--plot', plot);
    expect(r.code).toBe(0);
    expect(r.out).not.toMatch(/λ \(nm\)/);
    expect(r.out).toMatch(/^Tolerances: PASS/);
    const svg = readFileSync(plot, 'utf8');
    // Two panels; the reflectance axis reaches no further than the AR's data and bounds (< 1 %).
    expect(svg.match(/class="chart-title"/g)).toHaveLength(2);
    const rPanel = svg.slice(0, svg.indexOf('Four-layer visible AR on N-BK7: T'));
    const rTicks = [...rPanel.matchAll(/class="tick-label tick-y"[^>]*>([^<]+)%</g)].map((m) => Number(m[1]));
    expect(Math.max(...rTicks)).toBeLessThan(1);
    expect(svg).toContain('R ≤ 0.6 %, 420–680 nm (met)');
    const both = await run('spectrum', ar, '--plot', plot, '--table');
    expect(both.out).toMatch(/λ \(nm\)/);
  });

  it('refuses bad input with one sentence and a non-zero code', async () => {
    const file = tempDesign(quarterWave);
    const cases: [string[], number, RegExp][] = [
      [[], 2, /exactly one DESIGN/],
      [['--pol', 'x'], 2, /--pol must be s, p or mean/],
      [['--angle', '95'], 2, /--angle must be/],
      [['--from', '600', '--to', '500'], 2, /must be above/],
      [['--step', 'abc'], 2, /--step expects a number/],
      [['--json', '--csv'], 2, /one of --json, --csv or --table/],
      [['--plot', 'r.png'], 2, /--plot writes an SVG drawing: name a file ending in \.svg, got "r\.png"/],
      [['--nonsense'], 2, /Unknown option/],
    ];
    for (const [args, code, message] of cases) {
      const r = await run('spectrum', ...(args.length === 0 ? [] : [file, ...args]));
      expect(r.code, args.join(' ')).toBe(code);
      expect(r.err, args.join(' ')).toMatch(message);
      expect(r.err.trim().split('\n')).toHaveLength(1);
    }
    const missing = await run('spectrum', '/nonexistent/design.yaml');
    expect(missing.code).toBe(1);
    expect(missing.err).toMatch(/no such file/);
    const unknown = await run('nonsense');
    expect(unknown.code).toBe(2);
    expect(unknown.err).toMatch(/unknown command "nonsense"/);
  });

  it('refuses wavelengths outside a material’s data', async () => {
    const file = tempDesign(`formatVersion: 1
name: glass
substrate: { material: N-BK7 }
layers: [{ material: SiO2, thicknessNm: 100 }]
`);
    const r = await run('spectrum', file, '--from', '200', '--to', '300');
    expect(r.code).toBe(1);
    expect(r.err).toMatch(/has data for .* nm only/);
  });

  it('runs as the installed bin', () => {
    const out = execFileSync('npx', ['--no-install', 'fringe', 'spectrum', tempDesign(quarterWave), '--wavelength', '550', '--json'], {
      cwd: root,
      encoding: 'utf8',
    });
    expect((JSON.parse(out) as { R: number[] }).R[0]).toBeCloseTo(0.012600790214630288, 12);
  });
});

describe('fringe tooling', () => {
  it('corrects a tooling factor from a calibration run', async () => {
    // Definition (physics-notes): TF_new = TF_old · measured / indicated; 100 % · 157/250 = 62.8 %.
    const r = await run('tooling', '--factor', '100%', '--measured', '157', '--indicated', '250', '--json');
    expect(r.code).toBe(0);
    expect((JSON.parse(r.out) as { percent: number }).percent).toBeCloseTo(62.8, 12);
    const fraction = await run('tooling', '--factor', '1.05', '--measured', '98', '--indicated', '100');
    expect(fraction.out).toMatch(/tooling factor 102\.90 %/);
    const bad = await run('tooling', '--factor', '1.05', '--measured=-3', '--indicated', '100');
    expect(bad.code).toBe(2);
    expect(bad.err).toMatch(/--measured must be positive/);
    expect((await run('tooling', '--factor', '1')).err).toMatch(/needs --factor, --measured and --indicated/);
  });
});
