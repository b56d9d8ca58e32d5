/**
 * Operator commands, each its own route:
 *   POST /api/commands/{start,hold,resume,cut-now,skip-layer,abort,acknowledge}
 *   GET  /api/commands   the actions (checks a token without acting)
 * Every one needs `Authorization: Bearer <command token>`, checked in constant time before the
 * body is even read: 401 without it or with a wrong one. A bad body is 400 with what was
 * expected; a command the run cannot take now is 409 with the reason; an applied one is 200
 * with the events it caused.
 */
import type { FastifyInstance, FastifyReply, FastifyRequest } from 'fastify';
import type { OperatorAction } from '../../pipeline/types.ts';
import { bearerToken, tokensMatch } from '../auth.ts';
import { acknowledgeBody, commandResponse, commandsListResponse, emptyBody, errorSchema } from '../schemas.ts';

export const COMMAND_ACTIONS: readonly OperatorAction[] = ['start', 'hold', 'resume', 'cut-now', 'skip-layer', 'abort', 'acknowledge'];

export function commandsPlugin(app: FastifyInstance, _options: unknown, done: (error?: Error) => void): void {
  app.addHook('onRequest', async (request: FastifyRequest, reply: FastifyReply) => {
    if (!tokensMatch(bearerToken(request.headers), app.fringe.token)) {
      const given = request.headers.authorization !== undefined;
      await reply
        .code(401)
        .header('www-authenticate', 'Bearer realm="fringe commands"')
        .send({
          statusCode: 401,
          error: 'Unauthorized',
          message: given ? 'the command token was not accepted' : 'commands need the command token (Authorization: Bearer <token>) printed when fringe started',
        });
    }
  });
  // A command without a body is the same as `{}`.
  app.addHook('preValidation', (request, _reply, next) => {
    if (request.body === undefined || request.body === null) request.body = {};
    next();
  });

  app.get('/commands', { schema: { response: { 200: commandsListResponse, 401: errorSchema } } }, (_request, reply) => {
    void reply.send({ actions: [...COMMAND_ACTIONS], commandsAccepted: app.fringe.hub.snapshot().commandsAccepted });
  });

  for (const action of COMMAND_ACTIONS) {
    app.post<{ Body: { alertId?: string } }>(
      `/commands/${action}`,
      {
        schema: {
          body: action === 'acknowledge' ? acknowledgeBody : emptyBody,
          response: { 200: commandResponse, 400: errorSchema, 401: errorSchema, 409: errorSchema },
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
