/** Serving the dashboard for a run the command line drives (`fringe run --serve`, `fringe replay --serve`). */
import { generateToken, isLoopback } from '../server/auth.ts';
import { buildServer } from '../server/build-server.ts';
import type { RunHub } from '../server/run-hub.ts';
import { CliError, numberOption } from './cli-error.ts';
import type { CommandIo } from './command-io.ts';

export interface ServedDashboard {
  url: string;
  close(): Promise<void>;
}

export async function serveDashboard(
  hub: RunHub,
  runsDir: string,
  values: { port?: string | undefined; host?: string | undefined },
  /** Further names it answers to, from `allowHostOption` (checked before the run starts). */
  allowedHosts: readonly string[],
  io: CommandIo,
): Promise<ServedDashboard> {
  const port = numberOption('port', values.port) ?? 7300;
  if (!Number.isInteger(port) || port < 0 || port > 65535) throw new CliError(`--port must be a whole number from 0 to 65535, got ${port}`);
  const host = values.host ?? '127.0.0.1';
  const token = generateToken();
  const viewerToken = isLoopback(host) ? undefined : generateToken();
  const app = buildServer({ hub, runsDir }, { token, viewerToken, host, allowedHosts });
  let address: string;
  try {
    address = await app.listen({ port, host });
  } catch (error) {
    throw new CliError(`cannot listen on ${host}:${port}: ${(error as Error).message}`, 1);
  }
  const url = `${address.replace('[::1]', 'localhost')}/`;
  io.err(`dashboard: ${viewerToken ? `${url}?viewer=${viewerToken}` : url}`);
  io.err(`command token (enter it on the dashboard to use the controls; it is shown only now): ${token}`);
  if (viewerToken) io.err(`warning: listening on ${host}, beyond this machine: keep the tokens to the people at the chamber`);
  return { url, close: () => app.close() };
}
