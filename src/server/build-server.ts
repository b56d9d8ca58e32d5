/**
 * The dashboard server: Fastify with four feature plugins (health, runs, commands, live) and
 * the static page. `buildServer` returns the instance without listening; the entry point
 * listens. It only observes the run and forwards operator commands to it.
 */
import { createRequire } from 'node:module';
import { dirname } from 'node:path';
import { fileURLToPath } from 'node:url';
import type { Writable } from 'node:stream';
import fastifyStatic from '@fastify/static';
import Fastify, { type FastifyInstance, type FastifyReply, type FastifyServerOptions } from 'fastify';
import { DASHBOARD_WORDS } from '../pipeline/cut-words.ts';
import { isLoopback, redactUrl } from './auth.ts';
import { createHostRule, splitTarget, type HostRule } from './host-rule.ts';
import { commandsPlugin, type CommandLimits } from './plugins/commands.ts';
import { healthPlugin } from './plugins/health.ts';
import { livePlugin, type LiveOptions, type LiveStats } from './plugins/live.ts';
import { runsPlugin } from './plugins/runs.ts';
import type { RunHub } from './run-hub.ts';

export interface ServerDeps {
  /** The run on show (and the one commands go to). */
  hub: RunHub;
  /** Folder of past runs (`runs/<id>/`). */
  runsDir: string;
}

export interface ServerOptions {
  /** Bearer token required by every command. */
  token: string;
  /** When set, viewing (the API and the feeds, not the static page) requires it, or the command token. */
  viewerToken?: string | undefined;
  /** Where the server will be bound; wider than loopback is reported by `exposed`. */
  host: string;
  /**
   * Further names the server answers to (`NAME`, or `NAME:PORT` for a forwarded port), beyond
   * 127.0.0.1, localhost, [::1], the bound host and the address a connection was made to. Any
   * other Host is refused with 421, so that a page of another site cannot reach the server
   * under a name of its own.
   */
  allowedHosts?: readonly string[] | undefined;
  /** Fastify logging: off by default; `{ level, stream }` to capture. Tokens are never logged. */
  logger?: boolean | { level?: string; stream?: Writable };
  live?: Partial<LiveOptions>;
  /** Rate limits of the command routes (and the clock they fill by); defaults suit an operator. */
  commandLimits?: Partial<CommandLimits>;
}

/** What every plugin sees, decorated once on the instance. */
export interface ServerContext {
  readonly hub: RunHub;
  readonly runsDir: string;
  readonly token: string;
  readonly viewerToken: string | undefined;
  readonly host: string;
  /** True when bound beyond this machine. */
  readonly exposed: boolean;
  /** The names the server answers to (checked before anything else, for every route and feed). */
  readonly hostRule: HostRule;
  /** Counters of the live feed (kept by the live plugin). */
  readonly liveStats: LiveStats;
}

declare module 'fastify' {
  interface FastifyInstance {
    fringe: ServerContext;
  }
}

export const PUBLIC_DIR = fileURLToPath(new URL('./public/', import.meta.url));
const UPLOT_DIR = dirname(createRequire(import.meta.url).resolve('uplot'));

/**
 * Sent with every response, the API's included (a JSON answer opened as a page gets the same
 * fence). The page has no inline script, style or handler, so none is allowed; it is never framed.
 */
export const SECURITY_HEADERS: Readonly<Record<string, string>> = {
  'content-security-policy': [
    "default-src 'self'",
    "script-src 'self'",
    "style-src 'self'",
    "img-src 'self' data:",
    "connect-src 'self'",
    "object-src 'none'",
    "base-uri 'none'",
    "form-action 'none'",
    "frame-ancestors 'none'",
  ].join('; '),
  'x-content-type-options': 'nosniff',
  'x-frame-options': 'DENY',
  'referrer-policy': 'no-referrer',
};

export function buildServer(deps: ServerDeps, options: ServerOptions): FastifyInstance {
  if (options.token.length < 16) throw new Error('options.token must be at least 16 characters');
  if (options.viewerToken !== undefined && options.viewerToken.length < 16) throw new Error('options.viewerToken must be at least 16 characters');
  const app = Fastify({
    logger: loggerOptions(options.logger),
    // Unknown keys in a body are refused, not silently dropped: a typo must fail.
    ajv: { customOptions: { removeAdditional: false, allErrors: false } },
    bodyLimit: 16 * 1024,
    // Room for the longest run id (RUN_ID_PATTERN), no more.
    routerOptions: { maxParamLength: 128 },
    // The router's own refusals (before any hook runs): one plain sentence, with the security headers.
    frameworkErrors: (error, _request, routerReply) => {
      const reply = routerReply as FastifyReply;
      const tooLong = error.code === 'FST_ERR_MAX_PARAM_LENGTH';
      const statusCode = tooLong ? 414 : 400;
      void reply.code(statusCode).headers(SECURITY_HEADERS).send({
        statusCode,
        error: tooLong ? 'URI Too Long' : 'Bad Request',
        message: tooLong ? 'a part of this address is longer than any this server has' : 'this address could not be read (a malformed percent-encoding)',
      });
    },
    schemaErrorFormatter: (errors, dataVar) => {
      const first = errors[0];
      const params: Record<string, unknown> = first?.params ?? {};
      const detail = typeof params.additionalProperty === 'string' ? `has an unknown property "${params.additionalProperty}"` : (first?.message ?? 'is not valid');
      return new Error(`${dataVar}${first?.instancePath ?? ''} ${detail}`);
    },
  });
  app.decorate('fringe', {
    hub: deps.hub,
    runsDir: deps.runsDir,
    token: options.token,
    viewerToken: options.viewerToken,
    host: options.host,
    exposed: !isLoopback(options.host),
    hostRule: createHostRule(options.host, options.allowedHosts ?? []),
    liveStats: { clients: 0, replays: 0, dropped: 0, resyncs: 0, evicted: 0 },
  } satisfies ServerContext);

  app.addHook('onRequest', async (request, reply) => {
    const { hostRule } = app.fringe;
    const connection = request.raw.socket;
    if (!hostRule.allows(splitTarget(request.raw.url ?? '/').authority ?? request.headers.host, connection)) {
      await reply.code(421).send({ statusCode: 421, error: 'Misdirected Request', message: hostRule.refusal(connection) });
    }
  });
  app.addHook('onSend', async (_request, reply, payload) => {
    // A route may set a policy of its own (the run report's inline style, by hash); every other header stays.
    const own = reply.getHeader('content-security-policy');
    reply.headers(SECURITY_HEADERS);
    if (typeof own === 'string') reply.header('content-security-policy', own);
    return payload;
  });
  app.setErrorHandler((error: Error & { code?: string; statusCode?: number }, request) => {
    // Fastify's own words for an oversized body do not say what the limit is.
    if (error.code === 'FST_ERR_CTP_BODY_TOO_LARGE') {
      throw Object.assign(new Error(`the request body is larger than the ${request.routeOptions.bodyLimit ?? 0} bytes this address takes`), { statusCode: 413 });
    }
    throw error;
  });

  void app.register(healthPlugin, { prefix: '/api' });
  void app.register(runsPlugin, { prefix: '/api' });
  void app.register(commandsPlugin, { prefix: '/api', ...options.commandLimits });
  void app.register(livePlugin, { prefix: '/api', ...options.live });
  // The words for estimators and cut rules, from the one module the command line prints them from.
  const wordsModule = `// Built by the server from src/pipeline/cut-words.ts.\nexport const WORDS = ${JSON.stringify(DASHBOARD_WORDS)};\n`;
  app.get('/words.js', (_request, reply) => {
    void reply.type('text/javascript; charset=utf-8').header('cache-control', 'no-cache').send(wordsModule);
  });
  void app.register(fastifyStatic, { root: PUBLIC_DIR, prefix: '/', wildcard: false, index: 'index.html', cacheControl: false });
  void app.register(fastifyStatic, { root: UPLOT_DIR, prefix: '/vendor/uplot/', wildcard: false, decorateReply: false, maxAge: '1h' });
  return app;
}

function loggerOptions(logger: ServerOptions['logger']): NonNullable<FastifyServerOptions['logger']> {
  if (logger === undefined || logger === false) return false;
  const base = logger === true ? {} : logger;
  return {
    level: base.level ?? 'info',
    ...(base.stream ? { stream: base.stream } : {}),
    // The default request serializer logs the URL; mask a viewer token in it, and never log headers.
    redact: { paths: ['req.headers.authorization', `req.headers["x-fringe-viewer"]`], censor: '[redacted]' },
    serializers: {
      req: (request: { method: string; url: string; ip: string }) => ({ method: request.method, url: redactUrl(request.url), remoteAddress: request.ip }),
    },
  };
}
