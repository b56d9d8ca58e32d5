/**
 * Operator commands, each its own route:
 *   POST /api/commands/{start,hold,resume,cut-now,skip-layer,abort,acknowledge}
 *   GET  /api/commands   the actions (checks a token without acting)
 * Every one needs `Authorization: Bearer <command token>`, checked in constant time before the
 * body is even read: 401 without it or with a wrong one. A bad body is 400 with what was
 * expected, a body over {@link COMMAND_BODY_LIMIT} bytes 413; a command the run cannot take now
 * is 409 with the reason; an applied one is 200 with the events it caused.
 *
 * Two limits per client address, each answered 429 with Retry-After: refused tokens (a few, then
 * one every few seconds; while an address waits its tokens are not even compared, so guessing
 * learns nothing), and accepted commands (a burst, then a steady rate). A request without any
 * bearer token counts against neither: a page of another site can send one through the
 * operator's browser (it cannot add the header), and must not lock the operator out.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import type { OperatorAction } from '../../pipeline/types.ts';
import { bearerToken, tokensMatch } from '../auth.ts';
import { createRateLimiter, type BucketRule } from '../rate-limit.ts';
import { acknowledgeBody, commandResponse, commandsListResponse, emptyBody, errorSchema } from '../schemas.ts';

export const COMMAND_ACTIONS: readonly OperatorAction[] = ['start', 'hold', 'resume', 'cut-now', 'skip-layer', 'abort', 'acknowledge'];

/** Bytes a command body may have: the largest real one (an alert id) is a few dozen. */
export const COMMAND_BODY_LIMIT = 4096;

export interface CommandLimits {
  /** Commands with the right token, per client address. */
  commands: BucketRule;
  /** Refused bearer tokens, per client address. */
  refusedTokens: BucketRule;
  /** The clock the buckets fill by, seconds (default: the monotonic clock). */
  nowS: () => number;
}

export const DEFAULT_COMMAND_LIMITS: CommandLimits = {
  commands: { burst: 20, perSecond: 5 },
  refusedTokens: { burst: 5, perSecond: 0.2 },
  nowS: () => performance.now() / 1000,
};

export function commandsPlugin(app: FastifyInstance, options: Partial<CommandLimits>, done: (error?: Error) => void): void {
  const nowS = options.nowS ?? DEFAULT_COMMAND_LIMITS.nowS;
  const commandLimit = createRateLimiter(options.commands ?? DEFAULT_COMMAND_LIMITS.commands, nowS);
  const refusalLimit = createRateLimiter(options.refusedTokens ?? DEFAULT_COMMAND_LIMITS.refusedTokens, nowS);
  const tooMany = (reply: FastifyReply, seconds: number, what: string): FastifyReply =>
    reply
      .code(429)
      .header('retry-after', String(seconds))
      .send({ statusCode: 429, error: 'Too Many Requests', message: `${what} from this address; try again in ${seconds} s` });

  app.addHook('onRequest', async (request: FastifyRequest, reply: FastifyReply) => {
    const presented = bearerToken(request.headers);
    if (presented !== undefined) {
      const wait = refusalLimit.wait(request.ip);
      if (wait !== null) return tooMany(reply, wait, 'too many refused command tokens');
    }
    if (tokensMatch(presented, app.fringe.token)) {
      const wait = commandLimit.take(request.ip);
      if (wait !== null) return tooMany(reply, wait, 'too many commands');
      return;
    }
    if (presented !== undefined) refusalLimit.take(request.ip);
    const given = request.headers.authorization !== undefined;
    return reply
      .code(401)
      .header('www-authenticate', 'Bearer realm="fringe commands"')
      .send({
        statusCode: 401,
        error: 'Unauthorized',
        message: given ? 'the command token was not accepted' : 'commands need the command token (Authorization: Bearer <token>) printed when fringe started',
      });
  });
  // A command without a body is the same as `{}`.
  app.addHook('preValidation', (request, _reply, next) => {
    if (request.body === undefined || request.body === null) request.body = {};
    next();
  });

  app.get('/commands', { schema: { response: { 200: commandsListResponse, 401: errorSchema, 429: errorSchema } } }, (_request, reply) => {
    void reply.send({ actions: [...COMMAND_ACTIONS], commandsAccepted: app.fringe.hub.snapshot().commandsAccepted });
  });

  for (const action of COMMAND_ACTIONS) {
    app.post<{ Body: { alertId?: string } }>(
      `/commands/${action}`,
      {
        bodyLimit: COMMAND_BODY_LIMIT,
        schema: {
          body: action === 'acknowledge' ? acknowledgeBody : emptyBody,
          response: { 200: commandResponse, 400: errorSchema, 401: errorSchema, 409: errorSchema, 413: errorSchema, 429: errorSchema },
        },
      },
      (request, reply) => {
        const outcome = app.fringe.hub.command(action, action === 'acknowledge' ? request.body.alertId : undefined);
        request.log.info({ action, applied: outcome.applied }, 'operator command');
        if (!outcome.applied) {
          void reply.code(409).send({ statusCode: 409, error: 'Conflict', message: `${action}: ${outcome.reason}` });
          return;
        }
        void reply.send({ applied: true, action, timeS: outcome.timeS, events: outcome.events });
      },
    );
  }
  done();
}
