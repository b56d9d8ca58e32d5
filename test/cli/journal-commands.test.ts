// The commands that read or write a journal, at the command line: bad files refused in one
// sentence, damaged lines skipped with a warning, a resumed run keeping its clock, and a live run
// whose journal the disk refuses for a while.
import { copyFileSync, mkdtempSync, readdirSync, readFileSync, writeFileSync, writeSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { loadSimProfile, serveOnTcp } from '../../sim/index.ts';
import { runLive } from '../../src/cli/commands/run.ts';
import { runCli as run } from '../support/run-cli.ts';
import { loadRecipe } from '../../src/config/load-recipe.ts';
import { readJournal } from '../../src/journal/journal-reader.ts';
import type { JournalWrite } from '../../src/journal/journal-writer.ts';
import type { RunEvent } from '../../src/pipeline/events.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const ar4 = join(root, 'config/recipes/ar4-visible.yaml');

/** Control characters and bytes 0x7f–0xff in `text` (a newline apart): what junk echoed to a terminal would show. */
function echoedBytes(text: string): number[] {
  return [...text].map((c) => c.charCodeAt(0)).filter((code) => code !== 10 && (code < 0x20 || (code >= 0x7f && code <= 0xff)));
}

/** A simulated run's folder (journal, recipe.json), recorded on the arrival clock's default. */
async function simulatedRun(): Promise<string> {
  const dir = mkdtempSync(join(tmpdir(), 'fringe-journal-cli-'));
  const r = await run('simulate', ar4, '--journal', dir, '--seed', '3');
  expect(r.code, r.err).toBe(0);
  return join(dir, readdirSync(dir)[0] as string);
}

describe('replay and export of what is not a journal', () => {
  it('refuse it in one sentence naming the file, exit 1, never echoing its bytes', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-not-journal-'));
    const files: [string, string | Buffer, RegExp][] = [
      ['recipe.yaml', readFileSync(ar4), /recipe\.yaml is not a fringe journal/],
      ['junk.bin', Buffer.from([0x1b, 0x5b, 0x32, 0x4a, 0x00, 0xff, 0x07, 0x0a, 0x9b, 0x0a]), /junk\.bin is not a fringe journal/],
      ['no-meta.ndjson', '{"journal":"fringe","version":1,"runId":"a","startedAt":"x","recipe":"r"}\n{"k":"r","c":"o","t":0,"v":1,"a":0}\n', /no-meta\.ndjson has a damaged header: its meta is not an object/],
      ['typed.ndjson', '{"journal":"fringe","version":1,"runId":7,"startedAt":"x","recipe":"r","meta":{}}\n', /its runId is not a string/],
    ];
    for (const [name, content, message] of files) {
      const file = join(dir, name);
      writeFileSync(file, content);
      for (const argv of [['replay', file], ['export', file, '--csv'], ['replay', file, '--recipe', ar4]]) {
        const r = await run(...argv);
        expect(r.code, argv.join(' ')).toBe(1);
        expect(r.err, argv.join(' ')).toMatch(message);
        expect(r.err.trim().split('\n'), argv.join(' ')).toHaveLength(1);
        expect(r.err, argv.join(' ')).not.toMatch(/\bat \S+ \(/); // no stack trace
        expect(echoedBytes(r.err), argv.join(' ')).toEqual([]);
        expect(r.out).toBe('');
      }
    }
  });
});

describe('a journal with damaged lines', () => {
  it('replays and exports, skipping them with one warning line that names them', async () => {
    const runDir = await simulatedRun();
    const file = join(runDir, 'journal.ndjson');
    const clean = await run('replay', runDir, '--json');
    expect(clean.code, clean.err).toBe(0);
    // The table names what cut each layer in the words the dashboard uses, never a journal's code.
    const table = await run('replay', runDir);
    expect(table.out).toMatch(/ crystal thickness\n/);
    expect(table.out).toMatch(/ model fit\n/);
    expect(table.out).not.toMatch(/model-fit|crystal-thickness|trigger-level/);
    const lines = readFileSync(file, 'utf8').split('\n');
    // A torn line in the middle, as a resumed run used to leave, and a line of junk.
    lines.splice(40, 0, '{"k":"r","c":"o","t":3.1,"v":0.{"k":"r","c":"x","t":3.2,"v":5999000,"a":3.2}');
    lines.splice(100, 0, '\u0000\u0000\u0000');
    writeFileSync(file, lines.join('\n'));
    const replay = await run('replay', runDir, '--json');
    expect(replay.code, replay.err).toBe(0);
    expect(replay.err.trim().split('\n')).toEqual([`warning: ${file}: skipped 2 damaged lines: lines 41 (not JSON), 101 (not JSON)`]);
    const result = JSON.parse(replay.out) as { damagedLines: number; differing: number; layers: unknown[]; inputs: number };
    expect(result.damagedLines).toBe(2);
    expect(result.layers).toHaveLength(4);
    // Every cut is still reproduced: the lines lost were two readings out of thousands.
    expect(result.inputs).toBe((JSON.parse(clean.out) as { inputs: number }).inputs);
    const exported = await run('export', runDir, '--csv');
    expect(exported.code, exported.err).toBe(0);
    expect(exported.err).toMatch(/skipped 2 damaged lines/);
    expect(exported.out.trim().split('\n').length).toBeGreaterThan(100);
  });
});

describe('a journal with a changed number in the middle and a torn end', () => {
  it('replay, export, report and run --resume each name the lines in one warning, and read every other record', async () => {
    const runDir = await simulatedRun();
    const file = join(runDir, 'journal.ndjson');
    const lines = readFileSync(file, 'utf8').split('\n');
    // A reading whose value lost a digit (still JSON, still a reading), and a last line cut short.
    const changed = lines.findIndex((l, i) => i > 50 && /^\{"k":"r","c":"o",.*"v":0\.\d{3}/.test(l));
    lines[changed] = (lines[changed] as string).replace(/("v":0\.\d)\d/, '$1');
    const last = lines.length - 1; // after the final newline: the torn line goes here
    lines[last] = '{"k":"r","c":"o","t":1e3,"v":0.5';
    writeFileSync(file, lines.join('\n'));
    copyFileSync(join(root, 'config/chambers/sim-tcp.yaml'), join(runDir, 'chamber.yaml'));
    const warning = `warning: ${file}: skipped 1 damaged line: line ${changed + 1} (altered: its check fails); line ${last + 1} is cut off (the file ends inside it): read to the line before`;
    const replay = await run('replay', runDir, '--json');
    const exported = await run('export', runDir, '--csv');
    const report = await run('report', runDir, '--out', join(runDir, 'r.html'));
    // The run had finished: the resume replays it, says what it skipped, and refuses.
    const resume = await run('run', '--resume', runDir);
    for (const [name, r, code] of [['replay', replay, 0], ['export', exported, 0], ['report', report, 0], ['run --resume', resume, 1]] as const) {
      expect(r.code, `${name}: ${r.err}`).toBe(code);
      expect(r.err.split('\n')[0], name).toBe(warning);
      expect(r.err, name).not.toMatch(/\bat \S+ \(/);
    }
    expect(resume.err).toMatch(/has already finished/);
    expect((JSON.parse(replay.out) as { damagedLines: number }).damagedLines).toBe(1);
    // The changed reading is not among the exported rows; every other one is.
    expect(exported.out.split('\n').filter((row) => row.includes(',reading,')).length).toBe(lines.filter((l) => l.startsWith('{"k":"r"')).length - 2);
  });
});

describe('fringe run --resume', () => {
  it('keeps the recorded clock: another --clock is refused in one sentence', async () => {
    const runDir = await simulatedRun();
    const r = await run('run', '--resume', runDir, '--clock', 'instrument');
    expect(r.code).toBe(2);
    expect(r.err.trim()).toBe(`fringe run: the run in ${runDir} decides on the arrival clock; it resumes on it (leave out --clock)`);
  });

  it('refuses a journal whose header is damaged in one sentence', async () => {
    const runDir = await simulatedRun();
    const file = join(runDir, 'journal.ndjson');
    const text = readFileSync(file, 'utf8');
    writeFileSync(file, text.replace(/"meta":\{[^}]*\}/, '"meta":null'));
    const r = await run('run', '--resume', runDir);
    expect(r.code).toBe(1);
    expect(r.err.trim()).toBe(`fringe run: ${file} has a damaged header: its meta is not an object`);
  });
});

describe('a live run whose journal the disk refuses', () => {
  it('goes on: a critical alert to the operator, the lines held back and written once the disk recovers', async () => {
    const dir = mkdtempSync(join(tmpdir(), 'fringe-enospc-'));
    const recipe = loadRecipe(ar4);
    const served = await serveOnTcp({ recipe, profile: loadSimProfile(join(root, 'config/sim/typical.yaml')), seed: 4, speed: 100, port: 0 });
    const chamber = join(dir, 'chamber.yaml');
    writeFileSync(
      chamber,
      `formatVersion: 1
name: test chamber over TCP
instruments:
  - id: monitor
    transport: { kind: tcp, host: 127.0.0.1, port: ${served.port} }
    channels: [optical, crystal]
shutters:
  transport: monitor
  ack: { timeoutMs: 1000 }
`,
    );
    // The disk fills once layer 2 has started and is freed once layer 3 has.
    let full = false;
    let failedWrites = 0;
    const write: JournalWrite = (fd, data, offset) => {
      if (full) {
        failedWrites++;
        throw Object.assign(new Error('ENOSPC: no space left on device, write'), { code: 'ENOSPC' });
      }
      return writeSync(fd, data, offset);
    };
    let out = '';
    let err = '';
    const io = {
      out: (t: string) => {
        out += `${t}\n`;
        if (/layer 2 \S+: .* cut on/.test(t)) full = true;
        if (/layer 3 \S+: .* cut on/.test(t)) full = false;
      },
      err: (t: string) => (err += `${t}\n`),
    };
    let code: number;
    try {
      code = await runLive(['--chamber', chamber, '--clock', 'instrument', '--runs', join(dir, 'runs'), ar4], io, { journal: { write } });
    } finally {
      await served.close();
    }
    expect(code, `${out}\n${err}`).toBe(0);
    expect(failedWrites).toBeGreaterThan(0);
    const alerts = out.split('\n').filter((l) => l.includes('journal-'));
    expect(alerts[0]).toMatch(/^ALERT critical journal-write-failed: The journal cannot be written .*\(ENOSPC: no space left on device, write; \d+ KiB held back\)$/);
    expect(alerts[1]).toMatch(/^ALERT info journal-recovered: /);
    expect(alerts).toHaveLength(2);
    expect(err).not.toMatch(/journal is incomplete/);
    // Nothing was lost: all four cuts, every reading in order, the two alerts journalled.
    const runDir = join(dir, 'runs', readdirSync(join(dir, 'runs'))[0] as string);
    const journal = readJournal(join(runDir, 'journal.ndjson'));
    expect(journal.damagedLines).toBe(0);
    const events = journal.records.flatMap((r): RunEvent[] => (r.k === 'e' ? [r.event] : []));
    expect(events.filter((e) => e.type === 'cut').map((e) => (e as { layer: number }).layer)).toEqual([1, 2, 3, 4]);
    expect(events.filter((e) => e.type === 'alert' && e.id.startsWith('J')).map((e) => (e as { code: string }).code)).toEqual(['journal-write-failed', 'journal-recovered']);
    const times = journal.records.flatMap((r) => (r.k === 'r' && r.c === 'o' ? [r.t] : []));
    expect(times.every((t, i) => i === 0 || t >= (times[i - 1] as number))).toBe(true);
    const replay = await run('replay', runDir, '--json');
    expect(replay.code, replay.err).toBe(0);
    expect((JSON.parse(replay.out) as { differing: number }).differing).toBe(0);
  }, 120_000);
});

