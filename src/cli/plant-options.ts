/**
 * `--mqtt URL` and its companions on `run`, `demo` and `replay --serve`: the plant's broker from
 * the command line over a chamber file's `plant:` section. Credentials come from a file or the
 * environment, never from the command line (a process's arguments are visible to every user).
 */
import { readFileSync } from 'node:fs';
import { dirname, resolve } from 'node:path';
import { loadConfigFile } from '../config/read-config.ts';
import { validate } from '../config/validation.ts';
import { createPlantPublisher, type PlantPublisher } from '../plant/plant-publisher.ts';
import { BrokerCredentialsSchema, brokerUrlProblem, PlantSettingsSchema, topicLevel, type BrokerCredentials, type PlantSettings } from '../plant/plant-settings.ts';
import type { RunEvent } from '../pipeline/events.ts';
import type { RunHub } from '../server/run-hub.ts';
import { CliError } from './cli-error.ts';
import type { CommandIo } from './command-io.ts';

export const PLANT_OPTIONS = {
  mqtt: { type: 'string' },
  'mqtt-chamber': { type: 'string' },
  'mqtt-prefix': { type: 'string' },
  'mqtt-credentials': { type: 'string' },
  'mqtt-ca': { type: 'string' },
} as const;

export const plantUsage = `  --mqtt URL            publish the run to the plant's broker (mqtt://HOST[:PORT] or mqtts://…);
                        the broker is optional and never cuts: a broker away only raises an info alert
  --mqtt-chamber NAME   the chamber's name in the topics (default: the chamber file's name)
  --mqtt-prefix P       the topics' first levels (default fringe)
  --mqtt-credentials FILE  YAML with username and password (else FRINGE_MQTT_USERNAME and
                        FRINGE_MQTT_PASSWORD; never on the command line)
  --mqtt-ca FILE        the certificate authority (PEM) of an mqtts broker
`;

interface PlantValues {
  mqtt?: string | undefined;
  'mqtt-chamber'?: string | undefined;
  'mqtt-prefix'?: string | undefined;
  'mqtt-credentials'?: string | undefined;
  'mqtt-ca'?: string | undefined;
}

export interface PlantPlan {
  settings: PlantSettings;
  chamber: string;
  credentials: BrokerCredentials | undefined;
  ca: string | undefined;
}

/**
 * The broker settings the command line and a chamber file's `plant:` section give together
 * (the command line wins), read and checked before any run starts; undefined when neither
 * names a broker. Relative files in the section are the chamber file's neighbours.
 */
export function plantPlan(values: PlantValues, defaultChamber: string, section?: { settings: PlantSettings | undefined; file: string }): PlantPlan | undefined {
  const fromFile = section?.settings;
  if (values.mqtt === undefined && fromFile === undefined) {
    for (const name of ['mqtt-chamber', 'mqtt-prefix', 'mqtt-credentials', 'mqtt-ca'] as const) if (values[name] !== undefined) throw new CliError(`--${name} needs --mqtt URL (or a plant: section in the chamber file)`);
    return undefined;
  }
  if (values.mqtt !== undefined) {
    const problem = brokerUrlProblem(values.mqtt);
    if (problem !== null) throw new CliError(`--mqtt: ${problem}`);
  }
  const chamberName = values['mqtt-chamber'];
  if (chamberName !== undefined && topicLevel(chamberName) !== chamberName) throw new CliError(`--mqtt-chamber must be letters, digits, ".", "-" and "_" (up to 64), starting with a letter or digit, got "${chamberName}"`);
  const near = (file: string): string => (section ? resolve(dirname(section.file), file) : file);
  const settings = validate(PlantSettingsSchema, {
    ...fromFile,
    ...(fromFile?.credentialsFile !== undefined ? { credentialsFile: near(fromFile.credentialsFile) } : {}),
    ...(fromFile?.caFile !== undefined ? { caFile: near(fromFile.caFile) } : {}),
    ...(values.mqtt !== undefined ? { url: values.mqtt } : {}),
    ...(chamberName !== undefined ? { chamber: chamberName } : {}),
    ...(values['mqtt-prefix'] !== undefined ? { prefix: values['mqtt-prefix'] } : {}),
    ...(values['mqtt-credentials'] !== undefined ? { credentialsFile: values['mqtt-credentials'] } : {}),
    ...(values['mqtt-ca'] !== undefined ? { caFile: values['mqtt-ca'] } : {}),
  }, 'the --mqtt options');
  return { settings, chamber: settings.chamber ?? topicLevel(defaultChamber), credentials: readCredentials(settings.credentialsFile), ca: readCa(settings.caFile) };
}

function readCredentials(file: string | undefined): BrokerCredentials | undefined {
  if (file !== undefined) return loadConfigFile(BrokerCredentialsSchema, file);
  const username = process.env.FRINGE_MQTT_USERNAME;
  const password = process.env.FRINGE_MQTT_PASSWORD;
  if (!username && !password) return undefined;
  if (!username || !password) throw new CliError('FRINGE_MQTT_USERNAME and FRINGE_MQTT_PASSWORD go together: set both, or neither');
  return { username, password };
}

function readCa(file: string | undefined): string | undefined {
  if (file === undefined) return undefined;
  const text = readFileSync(file, 'utf8');
  if (!text.includes('-----BEGIN CERTIFICATE-----')) throw new CliError(`${file} holds no PEM certificate (a "-----BEGIN CERTIFICATE-----" block)`);
  return text;
}

/** Starts publishing the hub's run; the broker's comings and goings are alerts through `record` and the console. */
export function startPlant(plan: PlantPlan, hub: RunHub, record: (alert: Extract<RunEvent, { type: 'alert' }>) => void, io: CommandIo): PlantPublisher {
  io.err(`publishing to ${plan.settings.url} as ${plan.settings.prefix}/${plan.chamber}/…`);
  return createPlantPublisher({
    settings: plan.settings,
    chamber: plan.chamber,
    hub,
    credentials: plan.credentials,
    ca: plan.ca,
    raise(alert) {
      io.err(`ALERT ${alert.severity} ${alert.code}: ${alert.message}`);
      record(alert);
    },
  });
}

/** Ends publishing and says what the broker never received. */
export async function stopPlant(publisher: PlantPublisher | undefined, io: CommandIo): Promise<void> {
  if (!publisher) return;
  const stats = await publisher.close();
  if (stats.waiting > 0 || stats.dropped > 0) io.err(`the broker did not receive ${stats.waiting + stats.dropped} messages (${stats.dropped} dropped from a full queue, ${stats.waiting} still waiting at the end)`);
}
