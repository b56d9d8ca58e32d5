/** `fringe report RUN`: one self-contained HTML page of a recorded run, to open, print or send. */
import { basename, join } from 'node:path';
import { parseCommandArgs } from '../parse-command-args.ts';
import { collectRunReport, RunReportError, type RunReport } from '../../server/run-report.ts';
import { renderRunReport } from '../../server/run-report-page.ts';
import { CliError, outputFileOption, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { readRecordedRun, warnOfDamage } from '../run-folder.ts';

export const reportUsage = `Usage: fringe report RUN [--out FILE.html]

Writes one self-contained HTML page of a recorded run (a run folder, or its journal file): the
recipe, the chamber, per layer the target, the cut, the estimate and its error, the alerts, a
small trace of every layer, the crystal's rate, the outcome spectrum and, when the run folder
holds calibration.json, the calibration. Charts are inline SVG; the page needs no script and
prints to PDF from the browser. The run needs its recipe.json (the recipe as run).

  --out FILE.html       where to write it (default: report.html in the run folder)
`;

export function runReport(argv: string[], io: CommandIo): number {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: { out: { type: 'string' }, help: { type: 'boolean', short: 'h' } },
  });
  if (values.help) {
    io.out(reportUsage);
    return 0;
  }
  if (positionals.length !== 1) throw new CliError('report needs exactly one RUN (a run folder or a journal file; see fringe report --help)');
  if (values.out !== undefined && !/\.html?$/i.test(values.out)) throw new CliError(`--out names the page to write and must end in .html, got "${values.out}"`);
  const recorded = readRecordedRun(positionals[0] as string);
  const outFile = outputFileOption('out', values.out ?? join(recorded.dir, 'report.html'));
  let report: RunReport;
  try {
    report = collectRunReport(recorded.dir, basename(recorded.dir));
  } catch (error) {
    if (error instanceof RunReportError) throw new CliError(error.message, 1);
    throw error;
  }
  writeOutputFile(outFile, renderRunReport(report));
  // The report read the journal itself: its pass found the damage.
  warnOfDamage(recorded, io, report.damage);
  io.out(`wrote ${outFile}`);
  return 0;
}
