/**
 * Resolves when the command is asked to stop: the caller's abort signal (tests), else the first
 * SIGINT or SIGTERM. A command that serves until stopped waits on this, then closes what it holds.
 */
export function untilStopped(signal?: AbortSignal): Promise<void> {
  return new Promise<void>((resolve) => {
    const finish = (): void => {
      process.off('SIGINT', finish);
      process.off('SIGTERM', finish);
      resolve();
    };
    if (signal) {
      if (signal.aborted) finish();
      else signal.addEventListener('abort', finish, { once: true });
    } else {
      process.once('SIGINT', finish);
      process.once('SIGTERM', finish);
    }
  });
}
