/** `fringe export RUN --csv`: a run's readings and events as CSV for a spreadsheet. */
import { parseCommandArgs } from '../parse-command-args.ts';
import type { RunEvent } from '../../pipeline/events.ts';
import { CliError, writeOutputFile } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { readRecordedRun } from '../run-folder.ts';

export const exportUsage = `Usage: fringe export RUN --csv [--out FILE]

Writes a run's readings (time_s, channel, value, arrival_s) and events (time_s, event, layer,
detail) as CSV: to FILE, or to standard output.
`;

export function runExport(argv: string[], io: CommandIo): number {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: { csv: { type: 'boolean' }, out: { type: 'string' }, help: { type: 'boolean', short: 'h' } },
  });
  if (values.help) {
    io.out(exportUsage);
    return 0;
  }
  if (positionals.length !== 1) throw new CliError('export needs exactly one RUN (a run folder or a journal file)');
  if (!values.csv) throw new CliError('say which format: --csv');
  const { journal } = readRecordedRun(positionals[0] as string);
  const rows = ['time_s,kind,channel_or_event,value,arrival_s,layer,detail'];
  for (const r of journal.records) {
    if (r.k === 'r') rows.push(`${r.t},reading,${r.c === 'o' ? 'optical' : 'crystal'},${r.v},${r.a},,`);
    else if (r.k === 'i' && r.input.kind !== 'tick') rows.push(`${r.t},input,${r.input.kind},,,,${csvText(JSON.stringify(r.input))}`);
    else if (r.k === 'e' && r.event.type !== 'replanned') rows.push(`${r.event.timeS},event,${r.event.type},${valueOf(r.event)},,${'layer' in r.event ? (r.event.layer ?? '') : ''},${csvText(detailOf(r.event))}`);
  }
  const text = `${rows.join('\n')}\n`;
  if (values.out) {
    writeOutputFile(values.out, text);
    io.err(`wrote ${values.out} (${rows.length - 1} rows)`);
  } else io.out(text);
  return 0;
}

function valueOf(e: RunEvent): string {
  if (e.type === 'cut' || e.type === 'layer-finished') return String(e.estimatedNm);
  return '';
}

function detailOf(e: RunEvent): string {
  switch (e.type) {
    case 'cut':
      return e.reason;
    case 'alert':
      return `${e.severity} ${e.code}: ${e.message}`;
    case 'shutter':
      return `${e.command.source} ${e.command.action}`;
    case 'layer-started':
      return `${e.material} ${e.targetNm} nm ${e.cut}`;
    default:
      return '';
  }
}

/** Quotes a CSV field when it needs it (RFC 4180). */
function csvText(text: string): string {
  return /[",\n]/.test(text) ? `"${text.replace(/"/g, '""')}"` : text;
}
