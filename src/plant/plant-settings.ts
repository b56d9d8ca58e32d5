/**
 * The plant's broker: where a chamber publishes its runs (`plant:` in the chamber file, or
 * `--mqtt URL` on the command line). Validated like every configuration file; credentials are
 * never part of it, only the file that holds them.
 */
import { z } from 'zod';

/** A topic level of our own: no MQTT wildcard or separator, nothing invisible. */
const TopicLevel = z.string().regex(/^[A-Za-z0-9][A-Za-z0-9._-]{0,63}$/, 'letters, digits, ".", "-" and "_" (up to 64), starting with a letter or digit');

/** `mqtt://host[:port]` or `mqtts://host[:port]`, without a user or password in it. */
export const BrokerUrlSchema = z.string().superRefine((text, ctx) => {
  const problem = brokerUrlProblem(text);
  // The address is not repeated in the message: it may hold a password.
  if (problem !== null) ctx.addIssue({ code: 'custom', input: undefined, message: problem });
});

export const PlantSettingsSchema = z.strictObject({
  /** The broker. */
  url: BrokerUrlSchema,
  /** First topic level (default `fringe`); several levels as `site/fringe`. */
  prefix: z.string().regex(/^[A-Za-z0-9][A-Za-z0-9._-]{0,63}(\/[A-Za-z0-9][A-Za-z0-9._-]{0,63}){0,3}$/, 'topic levels of letters, digits, ".", "-" and "_" joined by "/"').default('fringe'),
  /** The chamber's topic level (default: the chamber file's name, made topic-safe). */
  chamber: TopicLevel.optional(),
  /** Decimated readings per second per channel, QoS 0 (default 1; 0 publishes none; at most the dashboard's 30). */
  readingsPerS: z.number().min(0).max(30).default(1),
  /** QoS 1 messages held while the broker is away (beside the 64 sent and awaiting its acknowledgement), oldest dropped first (default 10000). */
  queueLimit: z.number().int().min(1).max(1_000_000).default(10_000),
  /** A YAML file with `username` and `password` (or the environment's FRINGE_MQTT_USERNAME / FRINGE_MQTT_PASSWORD). */
  credentialsFile: z.string().min(1).optional(),
  /** A PEM file of the certificate authority that signed the broker's certificate (mqtts). */
  caFile: z.string().min(1).optional(),
});
export type PlantSettings = z.output<typeof PlantSettingsSchema>;

export const BrokerCredentialsSchema = z.strictObject({
  username: z.string().min(1),
  // A password of digits is a number to YAML; as it is not echoed in a message, any other type is refused silently.
  password: z.union([z.string().min(1), z.number()]).transform(String),
});
export type BrokerCredentials = z.output<typeof BrokerCredentialsSchema>;

/** Null when `text` is a broker address fringe takes, else why not, as one phrase. */
export function brokerUrlProblem(text: string): string | null {
  let url: URL;
  try {
    url = new URL(text);
  } catch {
    // Not quoted: it may hold a password.
    return 'the broker address could not be read; expected mqtt://HOST[:PORT] or mqtts://HOST[:PORT]';
  }
  if (url.protocol !== 'mqtt:' && url.protocol !== 'mqtts:') return `the broker's address must start with mqtt:// or mqtts://, not ${url.protocol}//`;
  if (url.username !== '' || url.password !== '') return 'the broker address must not carry a user name or password: put them in a credentials file or FRINGE_MQTT_USERNAME and FRINGE_MQTT_PASSWORD';
  if (url.hostname === '') return 'the broker address names no host';
  if ((url.pathname !== '' && url.pathname !== '/') || url.search !== '' || url.hash !== '') return 'the broker address is mqtt://HOST[:PORT] and nothing after it';
  return null;
}

/** A name made into one topic level: anything else becomes "-". */
export function topicLevel(name: string): string {
  const level = name.replace(/[^A-Za-z0-9._-]+/g, '-').replace(/^[^A-Za-z0-9]+/, '').slice(0, 64);
  return level === '' ? 'chamber' : level;
}
