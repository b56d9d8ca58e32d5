/**
 * `node:util` parseArgs, with one change: an option that takes a value accepts a negative
 * number as it (`--speed -5`), which parseArgs would refuse as an ambiguous option, so that the
 * command's own range check can say what is allowed.
 */
import { parseArgs, type ParseArgsConfig } from 'node:util';

const NEGATIVE_NUMBER = /^-(?:\d|\.\d)/;

export function parseCommandArgs<T extends ParseArgsConfig & { args: string[] }>(config: T): ReturnType<typeof parseArgs<T>> {
  const options = config.options ?? {};
  const takesValue = (token: string): boolean => token.startsWith('--') && options[token.slice(2)]?.type === 'string';
  const args: string[] = [];
  for (let i = 0; i < config.args.length; i++) {
    const token = config.args[i] as string;
    const next = config.args[i + 1];
    if (token === '--') {
      args.push(...config.args.slice(i));
      break;
    }
    if (takesValue(token) && next !== undefined && NEGATIVE_NUMBER.test(next)) {
      args.push(`${token}=${next}`);
      i++;
    } else args.push(token);
  }
  return parseArgs({ ...config, args });
}
