/**
 * `fringe floor --mqtt URL`: one read-only page for every chamber that publishes to the plant's
 * broker (subscribed here, on the server), and `--runs DIR`: the journals copied from several
 * chambers as one history. It sends nothing to any chamber.
 */
import { statSync } from 'node:fs';
import { connect, type MqttClient } from 'mqtt';
import { parseCommandArgs } from '../parse-command-args.ts';
import { generateToken, isLoopback } from '../../server/auth.ts';
import { indexRuns } from '../../plant/floor-history.ts';
import { buildFloorServer } from '../../plant/floor-server.ts';
import { createFloorState, type FloorRun } from '../../plant/floor-state.ts';
import { plantTopic } from '../../plant/plant-messages.ts';
import { allowHostOption, CliError, numberOption } from '../cli-error.ts';
import type { CommandIo } from '../command-io.ts';
import { untilStopped } from '../until-stopped.ts';
import { PLANT_OPTIONS, plantPlan } from '../plant-options.ts';

export const floorUsage = `Usage: fringe floor --mqtt URL [options]
       fringe floor --runs DIR [--mqtt URL] [options]

Serves one read-only page for the whole coating floor: every chamber that publishes to the
plant's broker (fringe run|demo|replay --serve with --mqtt), with its state, recipe, layer, time
to cut, open alerts and last runs; a click on a chamber opens its own dashboard. The page sends
no command.

  --mqtt URL            the plant's broker (mqtt://HOST[:PORT] or mqtts://…)
  --mqtt-prefix P       the topics' first levels (default fringe)
  --mqtt-credentials FILE  YAML with username and password (else FRINGE_MQTT_USERNAME and
                        FRINGE_MQTT_PASSWORD; never on the command line)
  --mqtt-ca FILE        the certificate authority (PEM) of an mqtts broker
  --runs DIR            journals copied from the chambers: DIR/<run>/ or DIR/<chamber>/<run>/
  --port N              port to listen on (default 7310; 0 picks a free one)
  --host ADDRESS        address to bind (default 127.0.0.1); anything wider needs the viewer token
  --allow-host NAME     another name the page answers to (as in fringe demo --help)
`;

export interface FloorHooks {
  /** Stops the server when aborted; otherwise SIGINT and SIGTERM do. */
  signal?: AbortSignal;
  onListening?: (info: { url: string }) => void;
}

const HISTORY_MAX_AGE_MS = 5000;

export async function runFloor(argv: string[], io: CommandIo, hooks: FloorHooks = {}): Promise<number> {
  const { values, positionals } = parseCommandArgs({
    args: argv,
    allowPositionals: true,
    strict: true,
    options: {
      mqtt: PLANT_OPTIONS.mqtt,
      'mqtt-prefix': PLANT_OPTIONS['mqtt-prefix'],
      'mqtt-credentials': PLANT_OPTIONS['mqtt-credentials'],
      'mqtt-ca': PLANT_OPTIONS['mqtt-ca'],
      runs: { type: 'string' },
      port: { type: 'string' },
      host: { type: 'string' },
      'allow-host': { type: 'string', multiple: true },
      help: { type: 'boolean', short: 'h' },
    },
  });
  if (values.help) {
    io.out(floorUsage);
    return 0;
  }
  if (positionals.length > 0) throw new CliError(`floor takes no positional arguments, got "${positionals[0]}" (see fringe floor --help)`);
  if (values.mqtt === undefined && values.runs === undefined) throw new CliError('floor needs --mqtt URL (the plant\'s broker), --runs DIR (journals on disk), or both');
  const port = numberOption('port', values.port) ?? 7310;
  if (!Number.isInteger(port) || port < 0 || port > 65535) throw new CliError(`--port must be a whole number from 0 to 65535, got ${port}`);
  const host = values.host ?? '127.0.0.1';
  const allowedHosts = allowHostOption(values['allow-host']);
  const runsDir = values.runs;
  if (runsDir !== undefined && !isFolder(runsDir)) throw new CliError(`--runs ${runsDir} is not a folder`);
  const plan = plantPlan(values, 'floor');
  const prefix = plan?.settings.prefix ?? 'fringe';

  const floor = createFloorState(prefix);
  let history: { runs: FloorRun[]; atMs: number } | null = null;
  const runsOnDisk = (): FloorRun[] => {
    if (runsDir === undefined) return [];
    // Journals are copied in while the page is up: look again, but not at every request.
    if (history === null || performance.now() - history.atMs > HISTORY_MAX_AGE_MS) {
      history = { runs: indexRuns(runsDir), atMs: performance.now() };
      floor.addHistory(history.runs);
    }
    return history.runs;
  };
  runsOnDisk();

  let client: MqttClient | undefined;
  if (plan) {
    client = connect(plan.settings.url, {
      clientId: `fringe-floor-${Math.random().toString(16).slice(2, 10)}`,
      clean: true,
      reconnectPeriod: 1000,
      reconnectOnConnackError: true,
      connectTimeout: 5000,
      ...(plan.credentials ? { username: plan.credentials.username, password: plan.credentials.password } : {}),
      ...(plan.ca !== undefined ? { ca: plan.ca } : {}),
    });
    let lost = false;
    client.on('connect', () => {
      if (lost) io.err(`the broker at ${plan.settings.url} answers again`);
      lost = false;
      client?.subscribe([plantTopic(prefix, '+', 'state'), plantTopic(prefix, '+', 'summary')], { qos: 1 });
    });
    client.on('message', (topic, payload) => floor.take(topic, payload));
    client.on('error', (error) => {
      if (!lost) io.err(`the broker at ${plan.settings.url} does not answer (${error.message}); the page shows what it last said`);
      lost = true;
    });
    client.on('close', () => {
      if (!lost) io.err(`lost the broker at ${plan.settings.url}; trying again every second`);
      lost = true;
    });
  }

  const viewerToken = isLoopback(host) ? undefined : generateToken();
  const app = buildFloorServer(
    {
      view: () => {
        runsOnDisk();
        return { ...floor.view(), broker: plan ? { url: plan.settings.url, connected: client?.connected ?? false } : null };
      },
      history: runsOnDisk,
    },
    { host, allowedHosts, viewerToken },
  );
  let address: string;
  try {
    address = await app.listen({ port, host });
  } catch (error) {
    await client?.endAsync(true);
    throw new CliError(`cannot listen on ${host}:${port}: ${(error as Error).message}`, 1);
  }
  const url = `${address.replace('[::1]', 'localhost')}/`;
  io.out(`floor: ${viewerToken ? `${url}?viewer=${viewerToken}` : url}`);
  if (viewerToken) io.err(`fringe floor: warning: listening on ${host}, beyond this machine: viewing needs the viewer token in the address above`);
  hooks.onListening?.({ url });

  await untilStopped(hooks.signal);
  await client?.endAsync(true);
  await app.close();
  io.out('stopped: the floor page has stopped');
  return 0;
}

function isFolder(path: string): boolean {
  try {
    return statSync(path).isDirectory();
  } catch {
    return false;
  }
}
