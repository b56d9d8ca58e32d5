/**
 * Bytes to lines, incrementally. Pure: no I/O, no clocks; the caller passes the arrival time that
 * an over-long line's fault should carry.
 *
 * What must stay true:
 * - the lines produced depend on the byte stream only, never on how it was cut into chunks, nor
 *   on what the caller does with a chunk's memory once `push` has returned (nothing is kept by
 *   reference);
 * - the framer never holds more than `maxLineBytes` bytes: a line that grows past the limit is
 *   reported once as a `line-too-long` fault, the rest of it is dropped, and framing resumes
 *   after the next terminator.
 */
import { z } from 'zod';
import { validate } from '../src/config/validation.ts';
import type { Fault } from '../src/pipeline/types.ts';

const LF = 0x0a;
const CR = 0x0d;
/** Longest excerpt of a bad line kept in a fault (the types promise at most 200 characters). */
export const FAULT_LINE_CHARS = 200;

export const LineFramerOptionsSchema = z.strictObject({
  /**
   * Longest line accepted, in bytes before the terminator (a CR before the LF counts). Default 1024.
   */
  maxLineBytes: z.number().int().min(8).max(1_048_576).default(1024),
  /**
   * Line terminator. `lf` (default): LF ends a line and a CR just before it is dropped, so both
   * LF and CRLF work. `cr`: CR ends a line and an LF just after it is skipped (CR and CRLF).
   */
  newline: z.enum(['lf', 'cr']).default('lf'),
});
/** Options of {@link createLineFramer}; every field has a default. */
export type LineFramerOptions = z.input<typeof LineFramerOptionsSchema>;
export type ResolvedLineFramerOptions = z.output<typeof LineFramerOptionsSchema>;

export interface LineFramer {
  /**
   * Feeds one chunk; returns the lines it completed, in order (text without the terminator,
   * decoded as UTF-8 with replacement characters), and a `line-too-long` fault at the point
   * where a line passed the limit.
   */
  push(chunk: Uint8Array, arrivalS?: number): Array<string | Fault>;
  /** Drops the partial line (use when the connection is lost: half a line is not a line). */
  reset(): void;
  /** Bytes of the partial line held now; never more than `maxLineBytes`. */
  readonly bufferedBytes: number;
}

/** Creates a framer; a bad option throws a `ConfigError` naming it. */
export function createLineFramer(options: LineFramerOptions = {}): LineFramer {
  const { maxLineBytes, newline } = validate(LineFramerOptionsSchema, options, 'createLineFramer options');
  const terminator = newline === 'lf' ? LF : CR;
  const decoder = new TextDecoder('utf-8', { fatal: false });
  // Enough bytes for FAULT_LINE_CHARS characters of UTF-8.
  const excerptBytes = Math.min(maxLineBytes, 4 * FAULT_LINE_CHARS);
  let parts: Uint8Array[] = [];
  let held = 0;
  /** Dropping the rest of an over-long line until its terminator. */
  let discarding = false;
  /** `cr` mode: the previous byte was the terminating CR, so an LF now belongs to it. */
  let skipLf = false;

  function takeLine(): Uint8Array {
    const line = parts.length === 1 ? (parts[0] as Uint8Array) : concat(parts, held);
    parts = [];
    held = 0;
    return line;
  }

  return {
    push(chunk, arrivalS = 0) {
      const out: Array<string | Fault> = [];
      let start = 0;
      if (skipLf && chunk.length > 0) {
        if (chunk[0] === LF) start = 1;
        skipLf = false;
      }
      while (start < chunk.length) {
        const end = chunk.indexOf(terminator, start);
        const stop = end === -1 ? chunk.length : end;
        if (!discarding && stop > start) {
          if (held + (stop - start) > maxLineBytes) {
            // The excerpt is the line's first `excerptBytes` bytes whatever the chunking (the
            // line is longer than that, or it would not have overflowed).
            const need = Math.max(0, excerptBytes - held);
            parts.push(keep(chunk, start, start + need));
            held += need;
            const head = decoder.decode(takeLine().subarray(0, excerptBytes)).slice(0, FAULT_LINE_CHARS);
            out.push({ kind: 'fault', channel: 'unknown', code: 'line-too-long', line: head, offset: maxLineBytes, arrivalS });
            discarding = true;
          } else {
            parts.push(keep(chunk, start, stop));
            held += stop - start;
          }
        }
        if (end === -1) break;
        if (discarding) {
          discarding = false;
        } else {
          let line = takeLine();
          if (newline === 'lf' && line.length > 0 && line[line.length - 1] === CR) line = line.subarray(0, line.length - 1);
          out.push(decoder.decode(line));
        }
        start = end + 1;
        if (newline === 'cr') {
          if (start < chunk.length) {
            if (chunk[start] === LF) start += 1;
          } else {
            skipLf = true;
          }
        }
      }
      return out;
    },
    reset() {
      parts = [];
      held = 0;
      discarding = false;
      skipLf = false;
    },
    get bufferedBytes() {
      return held;
    },
  };
}

/**
 * A copy of `chunk[from, to)` the framer may hold past this push. Never a view: a Buffer's
 * `slice` shares its memory, and a caller may reuse that memory for its next read (a read loop
 * into one buffer), which would rewrite the partial line held here.
 */
function keep(chunk: Uint8Array, from: number, to: number): Uint8Array {
  return new Uint8Array(chunk.subarray(from, to));
}

function concat(parts: readonly Uint8Array[], length: number): Uint8Array {
  const out = new Uint8Array(length);
  let at = 0;
  for (const part of parts) {
    out.set(part, at);
    at += part.length;
  }
  return out;
}
