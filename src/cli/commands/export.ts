/** `fringe export RUN --csv`: a run's readings and events as CSV for a spreadsheet. */
import { parseCommandArgs } from '../parse-command-args.ts';
import type { RunEvent } from '../../pipeline/events.ts';
import { CliError, openOutputFile, outputFileOption } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { readRecordedRun, warnOfDamage } from '../run-folder.ts';

export const exportUsage = `Usage: fringe export RUN --csv [--out FILE]

Writes a run's readings (time_s, channel, value, arrival_s), events (time_s, event, layer,
detail) and marks (where the run was resumed) as CSV: to FILE, or to standard output.
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
  const outFile = values.out === undefined ? undefined : outputFileOption('out', values.out);
  const recorded = readRecordedRun(positionals[0] as string);
  // Rows go out in batches as the journal is read: a long run's CSV is never one string.
  const out = outFile !== undefined ? openOutputFile(outFile) : { write: (text: string) => io.out(text), close: () => undefined };
  let batch: string[] = ['time_s,kind,channel_or_event,value,arrival_s,layer,detail'];
  let rows = 0;
  const emit = (row: string): void => {
    batch.push(row);
    rows++;
    if (batch.length >= 8192) {
      out.write(`${batch.join('\n')}\n`);
      batch = [];
    }
  };
  try {
    for (const r of recorded.journal.records) {
      if (r.k === 'r') emit(`${r.t},reading,${r.c === 'o' ? 'optical' : 'crystal'},${r.v},${r.a},,`);
      else if (r.k === 'i' && r.input.kind !== 'tick') emit(`${r.t},input,${r.input.kind},,,,${csvText(JSON.stringify(r.input))}`);
      else if (r.k === 'e' && r.event.type !== 'replanned') emit(`${r.event.timeS},event,${r.event.type},${valueOf(r.event)},,${'layer' in r.event ? (r.event.layer ?? '') : ''},${csvText(detailOf(r.event))}`);
      else if (r.k === 'm') emit(`${r.t},mark,${r.mark},,,,${csvText(`at ${r.at}`)}`);
    }
    if (batch.length > 0) out.write(`${batch.join('\n')}\n`);
  } finally {
    out.close();
  }
  warnOfDamage(recorded, io);
  if (outFile !== undefined) io.err(`wrote ${outFile} (${rows} rows)`);
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
