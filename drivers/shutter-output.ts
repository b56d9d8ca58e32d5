/**
 * The shutter output: turns a {@link ShutterCommand} into the configured command line, writes it
 * to a line link (the instrument's own or a separate one), and, when an acknowledgement is
 * configured, waits for it and raises an alert when none comes in time.
 *
 * What must stay true:
 * - `send()` never blocks and never throws: a command that cannot be sent (link down, no command
 *   configured, a template that would put a line break in the command) raises `shutter-not-sent`;
 * - nothing is queued: a command that could not be written is not sent later;
 * - every command sent with an acknowledgement configured ends in exactly one of: a matching
 *   `ShutterAck` on `acks`, or a `shutter-no-ack` alert after `timeoutMs`.
 */
import { Subject, type Observable, type Subscription } from 'rxjs';
import { z } from 'zod';
import { ConfigError, validate } from '../src/config/validation.ts';
import type { ShutterAck, ShutterCommand, ShutterSink, SourceStatus } from '../src/pipeline/types.ts';
import type { LineLink, LinkLine } from './line-link.ts';

const PLACEHOLDERS = new Set(['source', 'layer']);

/** A command template: text with `{source}` and `{layer}` placeholders, no line break. */
const TemplateSchema = z
  .string()
  .min(1)
  .superRefine((template, ctx) => {
    if (/[\r\n]/.test(template)) ctx.addIssue({ code: 'custom', message: 'must not contain a line break (the terminator is added)' });
    for (const match of template.matchAll(/\{([^}]*)\}/g)) {
      if (!PLACEHOLDERS.has(match[1] ?? '')) ctx.addIssue({ code: 'custom', message: `unknown placeholder {${match[1]}}: use {source} or {layer}` });
    }
  });

export const SourceCommandsSchema = z.strictObject({
  /** What the instrument calls this source, put in for `{source}` and matched in acks. Default: the source's name. */
  name: z
    .string()
    .min(1)
    .regex(/^[^\r\n]*$/, 'must not contain a line break')
    .optional(),
  /** Default `SHUTTER {source} OPEN {layer}` (fringe's format). */
  open: TemplateSchema.optional(),
  /** Default `SHUTTER {source} CLOSE {layer}` (fringe's format). */
  close: TemplateSchema.optional(),
});

/** fringe's acknowledgement: `ACK <source> OPEN|CLOSE <time_s>`. */
export const FRINGE_ACK_PATTERN = '^ACK (?<source>\\S+) (?<action>OPEN|CLOSE) (?<time>\\S+)$';
export const FRINGE_COMMANDS = Object.freeze({ open: 'SHUTTER {source} OPEN {layer}', close: 'SHUTTER {source} CLOSE {layer}' });

export const AckOptionsSchema = z
  .strictObject({
    /**
     * A regular expression with a named group `action` and optionally `source` and `time`.
     * Default {@link FRINGE_ACK_PATTERN}.
     */
    pattern: z.string().min(1).default(FRINGE_ACK_PATTERN),
    /** Flags among `i`, `m`, `s`, `u`. Default none. */
    flags: z.string().regex(/^(?!.*(.).*\1)[imsu]*$/, 'flags among i, m, s, u, each at most once').default(''),
    /** Words of the `action` group, compared without case. Default `OPEN` and `CLOSE`. */
    words: z
      .strictObject({ open: z.array(z.string().min(1)).min(1).default(['OPEN']), close: z.array(z.string().min(1)).min(1).default(['CLOSE']) })
      .prefault({}),
    /** How long to wait for the acknowledgement after sending. Default 1000 ms. */
    timeoutMs: z.number().int().positive().default(1000),
    /** Multiplies the `time` group to give seconds. Default 1. */
    timeScale: z.number().finite().positive().default(1),
  })
  .superRefine((ack, ctx) => {
    let groups: string[];
    try {
      groups = Object.keys(new RegExp(`${ack.pattern}|`, ack.flags).exec('')?.groups ?? {});
    } catch (error) {
      ctx.addIssue({ code: 'custom', path: ['pattern'], input: ack.pattern, message: `not a valid regular expression (${(error as Error).message})` });
      return;
    }
    if (!groups.includes('action')) ctx.addIssue({ code: 'custom', path: ['pattern'], input: ack.pattern, message: 'needs a named group (?<action>...)' });
  });

/** What a chamber file can say about the shutters (the link is bound separately). */
export const ShutterSettingsSchema = z.strictObject({
  /**
   * Commands per source, by the source's name (its material); the entry `default` applies to
   * sources not listed. When sources are listed and there is no `default`, a command for any
   * other source is refused (`shutter-not-sent`). Default: fringe's commands for every source.
   */
  commands: z.record(z.string().min(1), SourceCommandsSchema).default({}),
  /** Terminator added to each command. Default `lf`. */
  lineEnding: z.enum(['lf', 'crlf', 'cr']).default('lf'),
  /** Wait for an acknowledgement; absent: commands are sent and not confirmed. */
  ack: AckOptionsSchema.optional(),
});
export type ShutterSettings = z.input<typeof ShutterSettingsSchema>;

export type ShutterOutputOptions = ShutterSettings & {
  /** Where commands go and acknowledgements come from: a reading source's link or its own. */
  link: LineLink;
};

/** Raised when a shutter may not have done what it was told. */
export interface ShutterAlert {
  readonly kind: 'shutter-alert';
  /** `shutter-no-ack`: sent, not confirmed in time. `shutter-not-sent`: could not be sent. */
  readonly code: 'shutter-no-ack' | 'shutter-not-sent';
  readonly source: string;
  readonly action: 'open' | 'close';
  readonly layer: number;
  /** The command's run time, s. */
  readonly timeS: number;
  readonly detail: string;
}

export type ShutterOutput = ShutterSink & {
  readonly alerts: Observable<ShutterAlert>;
  /** The health of the link the commands go through (the link's own status stream). */
  readonly status: Observable<SourceStatus>;
  /** Stops waiting for acknowledgements and completes `acks` and `alerts`; the link stays open. */
  close(): void;
};

const ENDINGS = { lf: '\n', crlf: '\r\n', cr: '\r' } as const;

interface Pending {
  readonly command: ShutterCommand;
  readonly timer: ReturnType<typeof setTimeout>;
}

/** Creates the output; bad options throw a `ConfigError` naming them. */
export function createShutterOutput(options: ShutterOutputOptions): ShutterOutput {
  const { link, ...rest } = options;
  const name = 'createShutterOutput options';
  if (link === null || typeof link !== 'object' || typeof link.write !== 'function' || link.lines === undefined) {
    throw new ConfigError(name, [{ at: 'link', message: 'expected a line link (a line source or createLineLink)' }]);
  }
  const o = validate(ShutterSettingsSchema, rest, name);
  const ending = ENDINGS[o.lineEnding];
  const listed = Object.keys(o.commands).filter((k) => k !== 'default');
  const fallback = o.commands.default ?? (listed.length === 0 ? {} : undefined);
  /** Instrument name → source name, for acks. */
  const byName = new Map<string, string>();
  for (const [source, entry] of Object.entries(o.commands)) if (source !== 'default') byName.set(entry.name ?? source, source);

  const acks = new Subject<ShutterAck>();
  const alerts = new Subject<ShutterAlert>();
  const pending = new Map<string, Pending[]>();
  let done = false;

  const ack = o.ack;
  const ackPattern = ack ? new RegExp(ack.pattern, ack.flags) : undefined;
  const words = ack ? { open: new Set(ack.words.open.map((w) => w.toLowerCase())), close: new Set(ack.words.close.map((w) => w.toLowerCase())) } : undefined;

  function alert(code: ShutterAlert['code'], command: ShutterCommand, detail: string): void {
    if (done) return;
    alerts.next({ kind: 'shutter-alert', code, source: command.source, action: command.action, layer: command.layer, timeS: command.timeS, detail });
  }

  function settle(entry: Pending): void {
    clearTimeout(entry.timer);
    const key = keyOf(entry.command.source, entry.command.action);
    const queue = pending.get(key)?.filter((p) => p !== entry) ?? [];
    if (queue.length === 0) pending.delete(key);
    else pending.set(key, queue);
  }

  function commandText(command: ShutterCommand): string | { problem: string } {
    // Own keys only: a source called `constructor` must not find Object's.
    const own = Object.hasOwn(o.commands, command.source) ? o.commands[command.source] : undefined;
    const entry = own ?? fallback;
    if (entry === undefined) return { problem: `no command configured for source ${JSON.stringify(command.source)} (listed: ${listed.join(', ')})` };
    const template = entry[command.action] ?? fallback?.[command.action] ?? FRINGE_COMMANDS[command.action];
    const instrumentName = own?.name ?? command.source;
    const text = template.replace(/\{source\}/g, instrumentName).replace(/\{layer\}/g, String(command.layer));
    // A line break would split the command in two (and the second part could be anything).
    if (/[\r\n]/.test(text)) return { problem: `the command for ${JSON.stringify(command.source)} would contain a line break` };
    return text;
  }

  function onLine(line: LinkLine): void {
    if (!ackPattern || !words || !ack) return;
    const match = ackPattern.exec(line.text);
    if (match === null) return;
    const word = match.groups?.action?.toLowerCase();
    const action = word === undefined ? undefined : words.open.has(word) ? 'open' : words.close.has(word) ? 'close' : undefined;
    if (action === undefined) return;
    const said = match.groups?.source;
    let source: string | undefined = said === undefined ? undefined : (byName.get(said) ?? said);
    let entry: Pending | undefined;
    if (source !== undefined) {
      entry = pending.get(keyOf(source, action))?.[0];
    } else {
      // No source in the acknowledgement: it confirms the oldest command of that action.
      for (const queue of pending.values()) {
        const first = queue[0];
        if (first && first.command.action === action && (entry === undefined || first.command.timeS < entry.command.timeS)) entry = first;
      }
      source = entry?.command.source;
    }
    if (entry) settle(entry);
    if (source === undefined) return;
    const rawTime = match.groups?.time;
    const instrumentTime = rawTime === undefined ? Number.NaN : Number(rawTime);
    const timeS = Number.isFinite(instrumentTime) && rawTime?.trim() !== '' ? instrumentTime * ack.timeScale : line.arrivalS;
    acks.next({ kind: 'shutter-ack', action, source, timeS });
  }

  const subscription: Subscription = link.lines.subscribe({
    next: (item) => {
      if (item.kind === 'line') onLine(item);
    },
    complete: () => finish(),
  });

  function finish(): void {
    if (done) return;
    done = true;
    for (const queue of pending.values()) for (const entry of queue) clearTimeout(entry.timer);
    pending.clear();
    acks.complete();
    alerts.complete();
  }

  return {
    acks: acks.asObservable(),
    alerts: alerts.asObservable(),
    status: link.status,
    send(command) {
      if (done) return;
      const text = commandText(command);
      if (typeof text !== 'string') {
        alert('shutter-not-sent', command, text.problem);
        return;
      }
      let entry: Pending | undefined;
      if (ack) {
        const key = keyOf(command.source, command.action);
        const timer = setTimeout(() => {
          if (!entry) return;
          settle(entry);
          alert('shutter-no-ack', command, `no acknowledgement within ${ack.timeoutMs} ms of ${JSON.stringify(text)}`);
        }, ack.timeoutMs);
        entry = { command, timer };
        pending.set(key, [...(pending.get(key) ?? []), entry]);
      }
      link.write(text + ending).catch((error: unknown) => {
        // Not sent: no acknowledgement to wait for, one alert only.
        if (entry) settle(entry);
        alert('shutter-not-sent', command, `${JSON.stringify(text)} not sent: ${error instanceof Error ? error.message : String(error)}`);
      });
    },
    close() {
      subscription.unsubscribe();
      finish();
    },
  };
}

function keyOf(source: string, action: 'open' | 'close'): string {
  return `${action} ${source}`;
}
