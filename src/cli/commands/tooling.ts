/**
 * `fringe tooling`: a corrected tooling factor from a calibration run — the part thickness
 * measured (profilometer, ellipsometer, an optical fit) against what the crystal indicated.
 */
import { parseCommandArgs } from '../parse-command-args.ts';
import { recalibrateTooling } from '../../model/crystal/index.ts';
import { CliError, numberOption } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';

export const toolingUsage = `Usage: fringe tooling --factor F --measured NM --indicated NM [--json]

The corrected tooling factor (part thickness / crystal thickness) after a calibration run:
F_new = F · measured / indicated, where "indicated" is the part thickness the crystal reported
with factor F and "measured" what was measured on the part.

  --factor F            the tooling factor used, as a fraction (1.05) or a percentage (105%)
  --measured NM         the thickness measured on the part, nm
  --indicated NM        the part thickness the crystal indicated, nm
  --json                print {"toolingFactor": …, "percent": …}
`;

/** Tooling factors a chamber can have (part over crystal thickness; common practice, no source). */
const TOOLING_RANGE = [0.2, 5] as const;

export function runTooling(argv: string[], io: CommandIo): number {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      factor: { type: 'string' },
      measured: { type: 'string' },
      indicated: { type: 'string' },
      json: { type: 'boolean' },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(toolingUsage);
    return 0;
  }
  if (positionals.length > 0) throw new CliError(`tooling takes options only, got "${positionals[0]}" (see fringe tooling --help)`);
  const text = values.factor;
  if (text === undefined || values.measured === undefined || values.indicated === undefined) {
    throw new CliError('tooling needs --factor, --measured and --indicated');
  }
  const percent = text.trim().endsWith('%');
  const factor = (numberOption('factor', percent ? text.trim().slice(0, -1) : text) as number) / (percent ? 100 : 1);
  const measured = numberOption('measured', values.measured) as number;
  const indicated = numberOption('indicated', values.indicated) as number;
  for (const [name, v] of [['factor', factor], ['measured', measured], ['indicated', indicated]] as const) {
    if (!(v > 0)) throw new CliError(`--${name} must be positive, got ${v}`);
  }
  // A factor of 105 is 105 % written without its sign, not 10,500 %: refuse what no chamber has.
  if (factor < TOOLING_RANGE[0] || factor > TOOLING_RANGE[1]) {
    throw new CliError(
      `--factor ${text.trim()} is not a plausible tooling factor (${TOOLING_RANGE[0]} to ${TOOLING_RANGE[1]}): write it as a fraction (1.05) or a percentage (105 %)`,
    );
  }
  const corrected = recalibrateTooling(factor, measured, indicated);
  if (values.json) io.out(JSON.stringify({ toolingFactor: corrected, percent: corrected * 100 }));
  else io.out(`tooling factor ${(corrected * 100).toFixed(2)} % (${corrected.toFixed(4)}), from ${(factor * 100).toFixed(2)} % × ${measured} nm measured / ${indicated} nm indicated`);
  return 0;
}
