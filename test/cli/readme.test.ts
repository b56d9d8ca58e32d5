// The README as a new user reads it: the commands it prints are commands fringe has, written as
// they run after `npm install` (npx fringe …), and the Node.js it promises is the one `engines`
// says and every installed package accepts.
import { readFileSync } from 'node:fs';
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { runCli } from '../support/run-cli.ts';

const root = fileURLToPath(new URL('../../', import.meta.url));
const readme = readFileSync(`${root}README.md`, 'utf8');
const pkg = JSON.parse(readFileSync(`${root}package.json`, 'utf8')) as { engines: { node: string } };
const lock = JSON.parse(readFileSync(`${root}package-lock.json`, 'utf8')) as { packages: Record<string, { version?: string; engines?: { node?: string } | string[]; dev?: boolean; optional?: boolean }> };

type Version = [number, number, number];
const parse = (text: string): Version => {
  const [a = 0, b = 0, c = 0] = text.split('.').map(Number);
  return [a, b, c];
};
const compare = (x: Version, y: Version): number => x[0] - y[0] || x[1] - y[1] || x[2] - y[2];

/** Whether `version` satisfies an npm `engines.node` range of the forms packages write (|| of space-separated comparators). */
function satisfies(version: Version, range: string): boolean {
  return range.split('||').some((alternative) =>
    alternative
      .trim()
      .replace(/(>=|<=|>|<|\^|~)\s+/g, '$1')
      .split(/\s+/)
      .filter((c) => c !== '' && c !== '*' && c !== 'x')
      .every((comparator) => {
        const m = /^(>=|<=|>|<|\^|~|=)?v?(\d+(?:\.\d+){0,2})(?:\.x)?$/.exec(comparator);
        if (!m) throw new Error(`an engines range this test cannot read: "${range}"`);
        const op = m[1] ?? '';
        const parts = (m[2] as string).split('.').length;
        const bound = parse(m[2] as string);
        const c = compare(version, bound);
        switch (op) {
          case '>=':
            return c >= 0;
          case '>':
            return c > 0;
          case '<':
            return c < 0;
          case '<=':
            return c <= 0;
          case '^':
            return c >= 0 && version[0] === bound[0];
          case '~':
            return c >= 0 && version[0] === bound[0] && (parts === 1 || version[1] === bound[1]);
          default:
            // A bare "20" or "20.19" is every version that starts so.
            return bound.slice(0, parts).every((v, i) => version[i] === v);
        }
      }),
  );
}

describe('the README', () => {
  it('writes every command as it runs after npm install, and each is a command fringe has', async () => {
    const help = await runCli('--help');
    const commands = new Set([...help.out.matchAll(/^ {2}([a-z]+) /gm)].map((m) => m[1]));
    expect(commands.size).toBeGreaterThan(8);
    // In code (spans and blocks) a command is `npx fringe NAME`, never a bare `fringe NAME`.
    const code = [...readme.matchAll(/```[a-z]*\n([\s\S]*?)```|`([^`\n]+)`/g)].map((m) => m[1] ?? m[2] ?? '');
    const bare = code.filter((c) => /(^|[^\w/-])fringe [a-z]/.test(c.replace(/npx fringe /g, '')));
    expect(bare).toEqual([]);
    const named = new Set([...readme.matchAll(/npx fringe ([a-z]+)/g)].map((m) => m[1]));
    for (const name of named) expect(commands, `npx fringe ${name as string}`).toContain(name);
    for (const name of commands) expect(named, `the README names ${name as string}`).toContain(name);
    expect(readme).toMatch(/After `npm install`, run the commands below as `npx fringe …`/);
  });

  it('promises the Node.js that engines states, and every installed package accepts it', () => {
    const floor = /^>=(\d+\.\d+)\.0$/.exec(pkg.engines.node)?.[1];
    expect(floor, pkg.engines.node).toBeDefined();
    expect(readme).toContain(`Node.js ${floor as string} or later`);
    expect(readme.match(/Node\.js \d+(\.\d+)* or later/g)).toEqual([`Node.js ${floor as string} or later`]);
    const version = parse(floor as string);
    const refusing = Object.entries(lock.packages)
      .filter(([path, p]) => path !== '' && !p.optional && p.engines !== undefined && !Array.isArray(p.engines) && p.engines.node !== undefined)
      .filter(([, p]) => !satisfies(version, (p.engines as { node: string }).node))
      .map(([path, p]) => `${path.replace(/^.*node_modules\//, '')}@${p.version ?? '?'} wants node ${(p.engines as { node: string }).node}`);
    expect(refusing).toEqual([]);
  });

  it('reads engines ranges as npm does, for the forms the lock holds', () => {
    const v = (t: string): Version => parse(t);
    expect(satisfies(v('20.19.0'), '^20.19.0 || ^22.13.0 || >=24')).toBe(true);
    expect(satisfies(v('20.6.0'), '^20.19.0 || ^22.13.0 || >=24')).toBe(false);
    expect(satisfies(v('20.19.0'), '>=22')).toBe(false);
    expect(satisfies(v('20.19.0'), '18 || 20 || >=22')).toBe(true);
    expect(satisfies(v('21.0.0'), '18 || 20 || >=22')).toBe(false);
    expect(satisfies(v('20.19.0'), '^18 || ^20 || >= 21')).toBe(true);
    expect(satisfies(v('20.19.0'), '>=12.22')).toBe(true);
    expect(satisfies(v('20.19.0'), '*')).toBe(true);
  });
});
