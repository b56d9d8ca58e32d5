/**
 * The shutter output: turns a {@link ShutterCommand} into the configured command line, writes it
 * to a line link (the instrument's own or a separate one), and reports on `acks` what took effect
 * and on `faults` what may not have.
 *
 * What must stay true:
 * - `send()` never blocks and never throws;
 * - a command is confirmed by a matching acknowledgement when one is configured, else by being
 *   written (`confirmedBy: 'sent'`);
 * - a close is re-sent until confirmed: at once after each `shutter-no-ack` (up to
 *   `closeAttempts` writes), and when the link comes back after a `shutter-not-sent`; a newer
 *   command for the same shutter replaces it. An open is never re-sent: a layer opened late
 *   is worse than one not opened;
 * - every failure is a {@link ShutterFault} with its attempt number, `final` when the output will
 *   not try again (an open; a close after its last attempt; a source with no command);
 * - `unconfirmedCloses()` names the shutters whose last close is not confirmed, and `settled()`
 *   waits (bounded) until there are none.
 */
import { Subject, type Observable, type Subscription } from 'rxjs';
import { z } from 'zod';
import { ConfigError, validate } from '../src/config/validation.ts';
import type { ShutterAck, ShutterCommand, ShutterFault, ShutterSink, SourceStatus } from '../src/pipeline/types.ts';
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
  /** Wait for an acknowledgement; absent: a command counts as confirmed once written. */
  ack: AckOptionsSchema.optional(),
  /** Times a close is written before the output gives up waiting for its acknowledgement. Default 5. */
  closeAttempts: z.number().int().min(1).max(100).default(5),
  /** Wait before re-sending a close whose write failed on a connected link, ms. Default 1000. */
  closeRetryMs: z.number().int().positive().max(60_000).default(1000),
});
export type ShutterSettings = z.input<typeof ShutterSettingsSchema>;

export type ShutterOutputOptions = ShutterSettings & {
  /** Where commands go and acknowledgements come from: a reading source's link or its own. */
  link: LineLink;
};

export type ShutterOutput = ShutterSink & {
  /** The health of the link the commands go through (the link's own status stream). */
  readonly status: Observable<SourceStatus>;
  /** The sources whose last close has not been confirmed (being re-sent, or given up on). */
  unconfirmedCloses(): string[];
  /**
   * Resolves once every close is confirmed, or after `timeoutMs` or when the output closes,
   * with the sources still unconfirmed.
   */
  settled(timeoutMs: number): Promise<string[]>;
  /** Stops waiting and re-sending and completes `acks` and `faults`; the link stays open. */
  close(): void;
};

const ENDINGS = { lf: '\n', crlf: '\r\n', cr: '\r' } as const;

/** A command on its way: written and awaiting its acknowledgement, or (a close) awaiting a re-send. */
interface Attempt {
  readonly command: ShutterCommand;
  readonly text: string;
  /** Writes made. */
  writes: number;
  /** Failures reported. */
  failures: number;
  /** The acknowledgement's deadline, or the re-send's. */
  timer: ReturnType<typeof setTimeout> | undefined;
  /** Waiting for an acknowledgement (in `awaiting`). */
  inFlight: boolean;
  /** A close given up on (still unconfirmed). */
  abandoned: boolean;
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
  const faults = new Subject<ShutterFault>();
  /** Commands written and awaiting their acknowledgement, oldest first, by action and source. */
  const awaiting = new Map<string, Attempt[]>();
  /** Each source's last close until it is confirmed. */
  const closes = new Map<string, Attempt>();
  const waiters = new Set<() => void>();
  let linkUp = false;
  let done = false;

  const ack = o.ack;
  const ackPattern = ack ? new RegExp(ack.pattern, ack.flags) : undefined;
  const words = ack ? { open: new Set(ack.words.open.map((w) => w.toLowerCase())), close: new Set(ack.words.close.map((w) => w.toLowerCase())) } : undefined;

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

  /** Forgets an attempt's timer and its place among those awaiting an acknowledgement. */
  function retire(a: Attempt): void {
    clearTimeout(a.timer);
    a.timer = undefined;
    if (!a.inFlight) return;
    a.inFlight = false;
    const key = keyOf(a.command.source, a.command.action);
    const queue = awaiting.get(key)?.filter((p) => p !== a) ?? [];
    if (queue.length === 0) awaiting.delete(key);
    else awaiting.set(key, queue);
  }

  function confirmed(a: Attempt, timeS: number, confirmedBy?: 'sent'): void {
    retire(a);
    if (closes.get(a.command.source) === a) {
      closes.delete(a.command.source);
      wake();
    }
    acks.next({ kind: 'shutter-ack', action: a.command.action, source: a.command.source, timeS, ...(confirmedBy ? { confirmedBy } : {}) });
  }

  function fail(a: Attempt, code: ShutterFault['code'], detail: string, final: boolean): void {
    if (done) return;
    a.failures++;
    if (final && closes.get(a.command.source) === a) {
      a.abandoned = true;
      wake();
    }
    const { action, source, layer, timeS } = a.command;
    faults.next({ kind: 'shutter-fault', code, action, source, layer, attempt: a.failures, final, detail, timeS });
  }

  /** True while `a` is still the command to carry out for its shutter. */
  const current = (a: Attempt): boolean => !done && (a.command.action === 'open' || closes.get(a.command.source) === a);

  function write(a: Attempt): void {
    if (!current(a)) return;
    const retried = a.command.action === 'close';
    if (!linkUp) {
      // Sent again when the link is back (a close); an open is not.
      fail(a, 'shutter-not-sent', `${JSON.stringify(a.text)} not sent: ${link.description || 'the link'} is not connected`, !retried);
      return;
    }
    a.writes++;
    link.write(a.text + ending).then(
      () => {
        if (!current(a)) return;
        if (!ack) {
          confirmed(a, a.command.timeS, 'sent');
          return;
        }
        a.inFlight = true;
        const key = keyOf(a.command.source, a.command.action);
        awaiting.set(key, [...(awaiting.get(key) ?? []), a]);
        a.timer = setTimeout(() => {
          retire(a);
          const last = !retried || a.writes >= o.closeAttempts;
          fail(a, 'shutter-no-ack', `no acknowledgement within ${ack.timeoutMs} ms of ${JSON.stringify(a.text)}${retried ? ` (write ${a.writes} of ${o.closeAttempts})` : ''}`, last);
          if (!last) write(a);
        }, ack.timeoutMs);
      },
      (error: unknown) => {
        if (!current(a)) return;
        fail(a, 'shutter-not-sent', `${JSON.stringify(a.text)} not sent: ${error instanceof Error ? error.message : String(error)}`, !retried);
        // A failed write on a link that still looks up is tried again after a pause; a link
        // that went down brings the close back when it reconnects.
        if (retried && linkUp) a.timer = setTimeout(() => write(a), o.closeRetryMs);
      },
    );
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
    let entry: Attempt | undefined;
    if (source !== undefined) {
      entry = awaiting.get(keyOf(source, action))?.[0];
    } else {
      // No source in the acknowledgement: it confirms the oldest command of that action.
      for (const queue of awaiting.values()) {
        const first = queue[0];
        if (first && first.command.action === action && (entry === undefined || first.command.timeS < entry.command.timeS)) entry = first;
      }
      source = entry?.command.source;
    }
    if (source === undefined) return;
    const rawTime = match.groups?.time;
    const instrumentTime = rawTime === undefined ? Number.NaN : Number(rawTime);
    const timeS = Number.isFinite(instrumentTime) && rawTime?.trim() !== '' ? instrumentTime * ack.timeScale : line.arrivalS;
    // A late acknowledgement (after its deadline, while a re-send is on its way) still confirms the close.
    const close = action === 'close' ? closes.get(source) : undefined;
    if (entry) confirmed(entry, timeS);
    else if (close) confirmed(close, timeS);
    else acks.next({ kind: 'shutter-ack', action, source, timeS });
  }

  const subscription: Subscription = link.lines.subscribe({
    next: (item) => {
      if (item.kind === 'line') onLine(item);
    },
    complete: () => finish(),
  });
  const statusSubscription: Subscription = link.status.subscribe((s) => {
    const up = s.state === 'connected' || s.state === 'stale';
    const cameBack = up && !linkUp;
    linkUp = up;
    // Closes that could not be sent go out again now.
    if (cameBack) for (const a of [...closes.values()]) if (!a.inFlight && !a.abandoned && a.timer === undefined) write(a);
  });

  function wake(): void {
    for (const waiter of [...waiters]) waiter();
  }

  function unconfirmedCloses(): string[] {
    return [...closes.keys()];
  }

  function finish(): void {
    if (done) return;
    done = true;
    for (const a of closes.values()) clearTimeout(a.timer);
    for (const queue of awaiting.values()) for (const a of queue) clearTimeout(a.timer);
    awaiting.clear();
    wake();
    acks.complete();
    faults.complete();
  }

  return {
    acks: acks.asObservable(),
    faults: faults.asObservable(),
    status: link.status,
    send(command) {
      if (done) return;
      const text = commandText(command);
      const previous = closes.get(command.source);
      // The newest command for a shutter replaces a close still on its way.
      if (previous) {
        retire(previous);
        closes.delete(command.source);
      }
      const a: Attempt = { command, text: typeof text === 'string' ? text : '', writes: 0, failures: 0, timer: undefined, inFlight: false, abandoned: false };
      if (command.action === 'close') closes.set(command.source, a);
      if (typeof text !== 'string') fail(a, 'shutter-not-sent', text.problem, true);
      else write(a);
      if (previous) wake();
    },
    unconfirmedCloses,
    settled(timeoutMs) {
      return new Promise<string[]>((resolve) => {
        const check = (): void => {
          const open = unconfirmedCloses();
          if (!done && open.some((source) => !closes.get(source)?.abandoned)) return;
          clearTimeout(timer);
          waiters.delete(check);
          resolve(open);
        };
        const timer = setTimeout(() => {
          waiters.delete(check);
          resolve(unconfirmedCloses());
        }, timeoutMs);
        waiters.add(check);
        check();
      });
    },
    close() {
      subscription.unsubscribe();
      statusSubscription.unsubscribe();
      finish();
    },
  };
}

function keyOf(source: string, action: 'open' | 'close'): string {
  return `${action} ${source}`;
}
