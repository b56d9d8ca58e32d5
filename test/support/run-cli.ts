/** The `fringe` command through main(), in process, its output captured. */
import { main } from '../../src/cli/main.ts';

export interface CliOutcome {
  code: number;
  out: string;
  err: string;
}

export async function runCli(...argv: string[]): Promise<CliOutcome> {
  let out = '';
  let err = '';
  const code = await main(argv, { out: (t) => (out += `${t}\n`), err: (t) => (err += `${t}\n`) });
  return { code, out, err };
}
