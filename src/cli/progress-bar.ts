/**
 * One progress bar on a terminal, redrawn in place (carriage return, the rest of the line
 * cleared), ended with one newline. Anything that is not a terminal gets nothing: a log file or
 * a pipe must not fill with redrawn lines.
 */

/** Where the bar is drawn: process.stderr, or a test's recording stand-in. */
export interface ProgressSink {
  readonly isTTY?: boolean;
  write(text: string): unknown;
}

export interface ProgressBar {
  /** Redraws the bar at `fraction` (clamped to 0..1) with `label` after it. */
  update(fraction: number, label: string): void;
  /** Ends the line if anything was drawn. */
  end(): void;
}

const WIDTH = 30;
const CLEAR_TO_END = '\u001b[K';

export function createProgressBar(sink: ProgressSink = process.stderr): ProgressBar {
  if (sink.isTTY !== true) return { update: () => undefined, end: () => undefined };
  let drawn = false;
  return {
    update(fraction, label) {
      const clamped = Number.isFinite(fraction) ? Math.min(1, Math.max(0, fraction)) : 0;
      const filled = Math.round(clamped * WIDTH);
      sink.write(`\r[${'#'.repeat(filled)}${'.'.repeat(WIDTH - filled)}] ${label}${CLEAR_TO_END}`);
      drawn = true;
    },
    end() {
      if (drawn) sink.write('\n');
      drawn = false;
    },
  };
}
