/**
 * The chamber file: which instrument feeds which channel, over which port, in which line dialect,
 * and how the shutters are commanded. Validated like a recipe: every problem listed with its
 * path, unknown keys refused, defaults filled in, the result frozen.
 */
import { z } from 'zod';
import { loadConfigFile } from '../src/config/read-config.ts';
import type { InstrumentChannel } from '../src/pipeline/types.ts';
import { PlantSettingsSchema } from '../src/plant/plant-settings.ts';
import { ChannelKindSchema, FRINGE_DIALECT, LineDecoderOptionsSchema } from './line-decoder.ts';
import { SpectrumFormSchema } from './spectrum-decoder.ts';
import { LineFramerOptionsSchema } from './line-framer.ts';
import { createLineLink, LineLinkSettingsSchema, RetryOptionsSchema, type LineLink } from './line-link.ts';
import { createLineSource, type LineSource } from './line-source.ts';
import { createShutterOutput, ShutterSettingsSchema, type ShutterOutput } from './shutter-output.ts';
import { createSerialTransport, createTcpTransport, SerialSettingsSchema, TcpSettingsSchema, type SerialBinding, type TransportFactory } from './transport.ts';

export const TransportConfigSchema = z.discriminatedUnion('kind', [
  SerialSettingsSchema.extend({ kind: z.literal('serial') }),
  TcpSettingsSchema.extend({ kind: z.literal('tcp') }),
]);
export type TransportConfig = z.output<typeof TransportConfigSchema>;

export const InstrumentSchema = z.strictObject({
  /** How the shutters and the logs refer to this instrument. */
  id: z.string().regex(/^[A-Za-z][A-Za-z0-9_-]*$/, 'a name of letters, digits, - and _, starting with a letter'),
  transport: TransportConfigSchema,
  /** How its lines read. Default: fringe's own format. */
  dialect: LineDecoderOptionsSchema.prefault(FRINGE_DIALECT),
  /** The channels it feeds; each channel is fed by one instrument. */
  channels: z.array(z.enum([...ChannelKindSchema.options, 'spectral'])).min(1),
  /** How its spectra read: needed with the `spectral` channel, and only then. */
  spectrum: SpectrumFormSchema.optional(),
  ...LineLinkSettingsSchema.shape,
});

export const ChamberShuttersSchema = ShutterSettingsSchema.extend({
  /** The id of the instrument whose port carries the shutter commands, or a port of their own. */
  transport: z.union([z.string().min(1), TransportConfigSchema]),
  /** Only for a port of their own: framing, retry and stale settings (defaults as for an instrument). */
  framer: LineFramerOptionsSchema.optional(),
  retry: RetryOptionsSchema.optional(),
  staleAfterS: z.number().finite().positive().optional(),
});

export const ChamberSchema = z
  .strictObject({
    formatVersion: z.literal(1),
    name: z.string().min(1),
    description: z.string().optional(),
    instruments: z.array(InstrumentSchema).min(1),
    /** Absent: fringe only watches, and cuts are the operator's. */
    shutters: ChamberShuttersSchema.optional(),
    /** The plant's message broker the runs are published to (optional; never in the cutting path). */
    plant: PlantSettingsSchema.optional(),
  })
  .superRefine((chamber, ctx) => {
    const ids = new Map<string, number>();
    const feeder = new Map<InstrumentChannel, number>();
    chamber.instruments.forEach((instrument, i) => {
      const earlier = ids.get(instrument.id);
      if (earlier !== undefined) ctx.addIssue({ code: 'custom', path: ['instruments', i, 'id'], input: instrument.id, message: `"${instrument.id}" is also instruments[${earlier}]` });
      else ids.set(instrument.id, i);
      instrument.channels.forEach((channel, j) => {
        const other = feeder.get(channel);
        if (other !== undefined) ctx.addIssue({ code: 'custom', path: ['instruments', i, 'channels', j], input: channel, message: `${channel} is already fed by instruments[${other}]` });
        else feeder.set(channel, i);
      });
      const spectral = instrument.channels.includes('spectral');
      if (spectral && instrument.spectrum === undefined) {
        ctx.addIssue({ code: 'custom', path: ['instruments', i, 'spectrum'], input: undefined, message: 'needed for the spectral channel: how its frames read (form: table or json)' });
      }
      if (!spectral && instrument.spectrum !== undefined) {
        ctx.addIssue({ code: 'custom', path: ['instruments', i, 'spectrum'], input: instrument.spectrum, message: 'only for an instrument that feeds the spectral channel' });
      }
      const scalar = instrument.channels.some((c) => c !== 'spectral');
      const form = instrument.spectrum;
      if (scalar && form !== undefined && (form.form === 'table' ? form.rowTag === undefined : form.match === undefined)) {
        const at = form.form === 'table' ? 'rowTag' : 'match';
        ctx.addIssue({ code: 'custom', path: ['instruments', i, 'spectrum', at], input: undefined, message: `needed when the port carries other channels too: what tells a spectrum's line from theirs` });
      }
      // An instrument of spectra alone leaves its (default) dialect unused: its channels are not checked.
      const d = instrument.dialect;
      if (!scalar) return;
      if (d.channel !== undefined && !instrument.channels.includes(d.channel)) {
        ctx.addIssue({ code: 'custom', path: ['instruments', i, 'dialect', 'channel'], input: d.channel, message: `${d.channel} is not among this instrument's channels (${instrument.channels.join(', ')})` });
      }
      for (const [tag, channel] of Object.entries(d.channelTags ?? {})) {
        if (!instrument.channels.includes(channel)) {
          ctx.addIssue({ code: 'custom', path: ['instruments', i, 'dialect', 'channelTags', tag], input: channel, message: `${channel} is not among this instrument's channels (${instrument.channels.join(', ')})` });
        }
      }
    });
    const shutters = chamber.shutters;
    if (shutters && typeof shutters.transport === 'string') {
      const via = shutters.transport;
      if (!ids.has(via)) ctx.addIssue({ code: 'custom', path: ['shutters', 'transport'], input: via, message: `no instrument "${via}" (instruments: ${[...ids.keys()].join(', ')})` });
      for (const key of ['framer', 'retry', 'staleAfterS'] as const) {
        if (shutters[key] !== undefined) ctx.addIssue({ code: 'custom', path: ['shutters', key], input: shutters[key], message: `only for a port of the shutters' own; the link of "${via}" is set on that instrument` });
      }
    }
  });
/** A validated chamber, defaults filled in. */
export type Chamber = z.output<typeof ChamberSchema>;

/** Reads and validates a chamber file; throws a `ConfigError` listing every problem with its path. */
export function loadChamber(file: string): Chamber {
  return loadConfigFile(ChamberSchema, file);
}

export interface ChamberDeps {
  /** The serialport binding for every serial transport (tests pass `MockBinding`). */
  binding?: SerialBinding;
  /** Host monotonic seconds. Default `performance.now() / 1000`. */
  clock?: () => number;
}

export interface ChamberDrivers {
  /** One source per instrument, by id. */
  readonly sources: ReadonlyMap<string, LineSource>;
  readonly shutter: ShutterOutput | undefined;
  /** The shutters' own link, when they do not share an instrument's. */
  readonly shutterLink: LineLink | undefined;
  /** Closes the shutter output and every link. */
  close(): Promise<void>;
}

/** The transport factory a chamber's port settings describe. */
export function transportFactory(config: TransportConfig, deps: ChamberDeps = {}): TransportFactory {
  if (config.kind === 'serial') {
    const settings = omit(config, 'kind');
    return () => createSerialTransport(deps.binding ? { ...settings, binding: deps.binding } : settings);
  }
  const settings = omit(config, 'kind');
  return () => createTcpTransport(settings);
}

/** Opens every instrument's source and the shutter output a chamber describes. */
export function openChamber(chamber: Chamber, deps: ChamberDeps = {}): ChamberDrivers {
  const clock = deps.clock ? { clock: deps.clock } : {};
  const sources = new Map<string, LineSource>();
  let shutterLink: LineLink | undefined;
  let shutter: ShutterOutput | undefined;
  try {
    for (const instrument of chamber.instruments) {
      const { transport, dialect, channels, spectrum, framer, retry, staleAfterS } = instrument;
      sources.set(
        instrument.id,
        createLineSource({ framer, retry, staleAfterS, ...clock, transport: transportFactory(transport, deps), dialect, channels, ...(spectrum ? { spectrum } : {}) }),
      );
    }
    if (chamber.shutters) {
      const { transport, framer, retry, staleAfterS, ...settings } = chamber.shutters;
      let link: LineLink;
      if (typeof transport === 'string') {
        // The schema checked that the id names an instrument.
        link = sources.get(transport) as LineSource;
      } else {
        shutterLink = createLineLink({
          ...(framer ? { framer } : {}),
          ...(retry ? { retry } : {}),
          ...(staleAfterS !== undefined ? { staleAfterS } : {}),
          ...clock,
          transport: transportFactory(transport, deps),
        });
        link = shutterLink;
      }
      shutter = createShutterOutput({ ...settings, link });
    }
  } catch (error) {
    for (const source of sources.values()) void source.close();
    void shutterLink?.close();
    throw error;
  }
  return {
    sources,
    shutter,
    shutterLink,
    async close() {
      shutter?.close();
      await Promise.all([...[...sources.values()].map((s) => s.close()), shutterLink?.close()]);
    },
  };
}

function omit<T extends object, K extends keyof T>(value: T, key: K): Omit<T, K> {
  return Object.fromEntries(Object.entries(value).filter(([k]) => k !== key)) as Omit<T, K>;
}
