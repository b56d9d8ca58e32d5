// Every file or folder a command is given to read or write, refused in one sentence naming it
// with exit 1 when the file system cannot take it: never a trace, never a hang.
import { spawn, spawnSync } from 'node:child_process';
import { chmodSync, cpSync, mkdirSync, mkdtempSync, readdirSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { dirname, join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { beforeAll, describe, expect, it } from 'vitest';
import { runCli as run } from '../support/run-cli.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const ar4 = join(root, 'config/recipes/ar4-visible.yaml');
const ar4Design = join(root, 'config/designs/ar4-visible.yaml');
const tcpChamber = join(root, 'config/chambers/sim-tcp.yaml');
const temp = (): string => mkdtempSync(join(tmpdir(), 'fringe-paths-'));

interface Outcome {
  code: number | null;
  out: string;
  err: string;
}

/** The command as a process, killed if it has not ended within `limitMs` (a hang is a failure, not a stuck suite). */
function runProcess(argv: string[], limitMs = 60_000): Promise<Outcome & { hung: boolean }> {
  return new Promise((resolve) => {
    const child = spawn(process.execPath, [join(root, 'src/cli/fringe.js'), ...argv], { cwd: root, stdio: ['ignore', 'pipe', 'pipe'] });
    let out = '';
    let err = '';
    let hung = false;
    child.stdout.on('data', (d: Buffer) => (out += d.toString()));
    child.stderr.on('data', (d: Buffer) => (err += d.toString()));
    const timer = setTimeout(() => {
      hung = true;
      child.kill('SIGKILL');
    }, limitMs);
    child.once('exit', (code) => {
      clearTimeout(timer);
      resolve({ code, out, err, hung });
    });
  });
}

/** One line on stderr, no trace: what every refusal must look like. */
function expectOneSentence(r: Outcome, command: string, ...words: (string | RegExp)[]): void {
  expect(r.code, r.err).toBe(1);
  const lines = r.err.trim().split('\n');
  expect(lines, r.err).toHaveLength(1);
  expect(lines[0]).toMatch(new RegExp(`^fringe ${command}: `));
  expect(r.err).not.toMatch(/\n\s+at |Error:|node:internal/);
  for (const w of words) expect(lines[0]).toMatch(typeof w === 'string' ? new RegExp(w.replace(/[.*+?^${}()|[\]\\]/g, '\\$&')) : w);
}

describe('a folder option naming a file', () => {
  it('is refused before any work: simulate --journal, run --runs, demo --runs', async () => {
    const file = join(temp(), 'a-file');
    writeFileSync(file, 'x');
    expectOneSentence(await run('simulate', ar4, '--journal', file), 'simulate', `--journal ${file}: ${file} is a file, not a folder`);
    expectOneSentence(await run('simulate', ar4, '--journal', join(file, 'deeper')), 'simulate', `${file} is a file, not a folder`);
    expectOneSentence(await run('run', '--chamber', tcpChamber, ar4, '--runs', file), 'run', `--runs ${file}: ${file} is a file, not a folder`);
    expectOneSentence(await run('demo', '--runs', file, '--port', '0'), 'demo', `--runs ${file}: ${file} is a file, not a folder`);
  });
});

describe('an output file that cannot be written', () => {
  it('is refused naming it, in plain words: a folder in its place, a file on its path', async () => {
    const dir = join(temp(), 'named-like-a-plot.svg');
    mkdirSync(dir);
    const file = join(dir, 'a-file');
    writeFileSync(file, 'x');
    expectOneSentence(await run('spectrum', ar4Design, '--plot', dir), 'spectrum', `--plot ${dir}: it is a folder`);
    expectOneSentence(await run('plan', ar4, '--plot', join(file, 'x.svg')), 'plan', `--plot ${join(file, 'x.svg')}: ${file} is a file, not a folder`);
    // A study takes minutes: its plot is checked before it starts.
    expectOneSentence(await run('study', ar4, '--runs', '1', '--workers', '1', '--plot', dir), 'study', `--plot ${dir}: it is a folder`);
  });
});

describe('a run folder whose recipe.json is damaged', () => {
  let good: string;
  beforeAll(async () => {
    const dir = temp();
    const r = await run('simulate', ar4, '--journal', dir, '--seed', '2');
    expect(r.code, r.err).toBe(0);
    good = join(dir, readdirSync(dir)[0] as string);
  }, 120_000);

  it('is refused by replay and run --resume in one sentence naming the file', async () => {
    const cases: [string, (recipe: string) => void, string][] = [
      ['not JSON', (f) => writeFileSync(f, '{"name": "cut sho'), 'is damaged: it is not JSON'],
      ['JSON, not a recipe', (f) => writeFileSync(f, '[1, 2, 3]\n'), 'is damaged: it is not a recipe as fringe records it'],
      [
        'a folder',
        (f) => {
          rmSync(f);
          mkdirSync(f);
        },
        'cannot be read: it is a folder',
      ],
    ];
    for (const [, damage, sentence] of cases) {
      const copy = join(temp(), 'run');
      cpSync(good, copy, { recursive: true });
      const recipe = join(copy, 'recipe.json');
      damage(recipe);
      expectOneSentence(await run('replay', copy), 'replay', `${recipe} ${sentence}`);
      expectOneSentence(await run('run', '--resume', copy), 'run', `${recipe} ${sentence}`);
    }
  });
});

describe.runIf(process.platform === 'linux')('a folder under /proc, where a recursive mkdir spins for ever', () => {
  it('is refused at once by every command that makes one', { timeout: 600_000 }, async () => {
    const target = '/proc/fringe-test/x';
    const pseudo = "/proc is on the kernel's proc pseudo file system, not storage";
    const cases: [string, string[], string][] = [
      ['simulate', ['simulate', ar4, '--journal', target], `--journal ${target}: ${pseudo}`],
      ['run', ['run', '--chamber', tcpChamber, ar4, '--runs', target], `--runs ${target}: ${pseudo}`],
      ['demo', ['demo', '--runs', target, '--port', '0'], `--runs ${target}: ${pseudo}`],
      ['spectrum', ['spectrum', ar4Design, '--plot', `${target}/r.svg`], `--plot ${target}/r.svg: ${pseudo}`],
      ['spectrum', ['spectrum', ar4Design, '--plot', '/proc/r.svg'], `--plot /proc/r.svg: ${pseudo}`],
      ['study', ['study', ar4, '--runs', '1', '--plot', `${target}/s.svg`], `--plot ${target}/s.svg: ${pseudo}`],
    ];
    for (const [command, argv, sentence] of cases) {
      const r = await runProcess(argv);
      expect(r.hung, `${argv.join(' ')} hung`).toBe(false);
      expectOneSentence(r, command, sentence);
    }
    // export writes to its --out as it reads: checked the same way.
    const dir = temp();
    const sim = await run('simulate', ar4, '--journal', dir);
    expect(sim.code, sim.err).toBe(0);
    const r = await runProcess(['export', join(dir, readdirSync(dir)[0] as string), '--csv', '--out', `${target}/x.csv`]);
    expect(r.hung).toBe(false);
    expectOneSentence(r, 'export', `--out ${target}/x.csv: ${pseudo}`);
  });
});

describe('an empty name for a file or folder option', () => {
  it('is refused as a usage error, never taken as the current folder or as no option', async () => {
    const cases: [string, string[], string][] = [
      ['simulate', ['simulate', ar4, '--journal', ''], '--journal needs a folder name'],
      ['run', ['run', '--chamber', tcpChamber, ar4, '--runs', ' '], '--runs needs a folder name'],
      ['plan', ['plan', ar4, '--plot', ''], '--plot needs a file name'],
      ['spectrum', ['spectrum', ar4Design, '--plot', ''], '--plot needs a file name'],
      ['export', ['export', temp(), '--csv', '--out', ''], '--out needs a file name'],
    ];
    for (const [command, argv, sentence] of cases) {
      const r = await run(...argv);
      expect(r.code, `${argv.join(' ')}: ${r.err}`).toBe(2);
      expect(r.err).toBe(`fringe ${command}: ${sentence}\n`);
    }
  });
});

describe.runIf(process.platform === 'linux')('a journal that is a pipe or a device', () => {
  it('is refused at once by export, replay and run --resume (opening a pipe waits for a writer for ever)', async () => {
    const fifo = join(temp(), 'journal.ndjson');
    expect(spawnSync('mkfifo', [fifo]).status).toBe(0);
    for (const [command, argv] of [
      ['export', ['export', fifo, '--csv']],
      ['replay', ['replay', fifo]],
      ['run', ['run', '--resume', fifo]],
    ] as const) {
      const r = await runProcess([...argv]);
      expect(r.hung, `${argv.join(' ')} hung`).toBe(false);
      expectOneSentence(r, command, `${fifo} cannot be read: it is not a regular file`);
    }
    expectOneSentence(await run('replay', '/dev/null'), 'replay', '/dev/null cannot be read: it is not a regular file');
  });

  it('simulate --serve refuses a --pty path under /proc before starting anything', async () => {
    expectOneSentence(await run('simulate', ar4, '--serve', '--pty', '/proc/fringe-test/x'), 'simulate', "--pty /proc/fringe-test/x: /proc is on the kernel's proc pseudo file system, not storage");
  });
});

describe('a folder where writing is not permitted', () => {
  it('is refused naming the folder, for a run folder and for a plot', async () => {
    // Root may write anywhere: as root the commands run as the user nobody.
    const asRoot = process.getuid?.() === 0;
    if (process.platform === 'win32') return;
    const locked = join(temp(), 'locked');
    mkdirSync(locked, { mode: 0o555 });
    chmodSync(locked, 0o555);
    chmodSync(dirname(locked), 0o755);
    const attempt = async (argv: string[]): Promise<Outcome> => {
      if (!asRoot) return run(...argv);
      const r = spawnSync(process.execPath, [join(root, 'src/cli/fringe.js'), ...argv], { cwd: tmpdir(), uid: 65534, gid: 65534, encoding: 'utf8', timeout: 60_000 });
      return { code: r.status, out: r.stdout, err: r.stderr };
    };
    expectOneSentence(await attempt(['simulate', ar4, '--journal', join(locked, 'runs')]), 'simulate', `--journal ${join(locked, 'runs')}: permission denied in ${locked}`);
    expectOneSentence(await attempt(['spectrum', ar4Design, '--plot', join(locked, 'r.svg')]), 'spectrum', `--plot ${join(locked, 'r.svg')}: permission denied in ${locked}`);
  });
});
