/** Where a command writes: injected so tests capture output without spawning a process. */
export interface CommandIo {
  out(text: string): void;
  err(text: string): void;
}

export const processIo: CommandIo = {
  out: (text) => process.stdout.write(text.endsWith('\n') ? text : `${text}\n`),
  err: (text) => process.stderr.write(text.endsWith('\n') ? text : `${text}\n`),
};
