// Options on the command line through main(): a negative number is taken as the option's value
// and refused by fringe's own range check (not the argument parser's "ambiguous" message), and
// a tooling factor given as a percentage without its sign is refused, not taken ×100.
import { fileURLToPath } from 'node:url';
import { describe, expect, it } from 'vitest';
import { runCli as run } from '../support/run-cli.ts';
import { parseCommandArgs } from '../../src/cli/parse-command-args.ts';

const recipe = fileURLToPath(new URL('../../config/recipes/ar4-visible.yaml', import.meta.url));

describe('negative numbers to options', () => {
  it.each([
    [['study', recipe, '--runs', '-3'], /^fringe study: --runs must be a whole number from 1 to \d+, got -3$/],
    [['simulate', recipe, '--speed', '-5'], /^fringe simulate: --speed must be a positive number or "max", got "-5"$/],
    [['plan', recipe, '--noise', '-1'], /^fringe plan: --noise .*-1/],
    [['tooling', '--factor', '-1', '--measured', '100', '--indicated', '90'], /^fringe tooling: --factor must be positive, got -1$/],
  ])('%j gets fringe’s own range message', async (argv, message) => {
    const r = await run(...argv);
    expect(r.code).toBe(2);
    expect(r.err.trim()).toMatch(message);
    expect(r.err).not.toMatch(/ambiguous/i);
  });

  it('joins only options that take a value, and leaves everything after -- alone', () => {
    const options = { speed: { type: 'string' }, json: { type: 'boolean' } } as const;
    expect(parseCommandArgs({ args: ['--speed', '-.5', 'R'], options, allowPositionals: true }).values.speed).toBe('-.5');
    expect(parseCommandArgs({ args: ['--', '--speed', '-5'], options, allowPositionals: true }).positionals).toEqual(['--speed', '-5']);
    expect(() => parseCommandArgs({ args: ['--json', '-5'], options, allowPositionals: true, strict: true })).toThrow(/-5/);
  });
});

describe('fringe tooling --factor', () => {
  it.each([['1.05'], ['105%'], ['105 %']])('takes %s as 105 %%', async (factor) => {
    const r = await run('tooling', '--factor', factor, '--measured', '100', '--indicated', '90', '--json');
    expect(r.code).toBe(0);
    // F · measured / indicated = 1.05 · 100 / 90 (derived).
    expect((JSON.parse(r.out) as { toolingFactor: number }).toolingFactor).toBeCloseTo((1.05 * 100) / 90, 12);
  });

  it.each([['105'], ['0.1'], ['600%']])('refuses %s as implausible, saying how to write it', async (factor) => {
    const r = await run('tooling', '--factor', factor, '--measured', '100', '--indicated', '90');
    expect(r.code).toBe(2);
    expect(r.err.trim()).toBe(`fringe tooling: --factor ${factor} is not a plausible tooling factor (0.2 to 5): write it as a fraction (1.05) or a percentage (105 %)`);
  });
});
