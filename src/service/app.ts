import type { Socket } from 'node:net';
import Fastify, { type FastifyBaseLogger, type FastifyInstance, type FastifyPluginAsync, type FastifyReply } from 'fastify';
import type { Logger } from 'pino';
import { TapwardenError, type ErrorCode } from '../errors.js';

export function errorBody(code: ErrorCode, message: string) {
  return { error: { code, message } };
}

export function sendError(reply: FastifyReply, err: TapwardenError): FastifyReply {
  return reply.code(err.httpStatus ?? 500).send(errorBody(err.code, err.message));
}

/**
 * The HTTP root: one error shape for everything ({"error": {"code", "message"}}), including what
 * fastify and Node's parser refuse themselves (413, 415, a method Node does not know), and the
 * plugins (metrics, status, control, feed), each its own surface.
 */
export function buildApp(log: Logger, plugins: readonly FastifyPluginAsync[]): FastifyInstance {
  const app = Fastify({
    loggerInstance: log as unknown as FastifyBaseLogger,
    bodyLimit: 16 * 1024,
    ajv: { customOptions: { removeAdditional: false, coerceTypes: false, allErrors: false } },
    clientErrorHandler(err: NodeJS.ErrnoException, socket: Socket) {
      // A request Node cannot parse (an unknown method, a broken header) never reaches fastify.
      const body = JSON.stringify(errorBody('TW_ERR_HTTP_BAD_REQUEST', new TapwardenError('TW_ERR_HTTP_BAD_REQUEST', { reason: err.code ?? err.message }).message));
      if (socket.writable) {
        socket.end(`HTTP/1.1 400 Bad Request\r\nContent-Type: application/json; charset=utf-8\r\nContent-Length: ${Buffer.byteLength(body)}\r\nConnection: close\r\n\r\n${body}`);
      }
    },
  });
  // Bodies are JSON or nothing: anything else is 415. No body, or an empty JSON body, is an
  // empty request: control routes take either.
  app.removeAllContentTypeParsers();
  app.addContentTypeParser('application/json', { parseAs: 'string' }, (_req, body: string, done) => {
    if (body.trim() === '') return done(null, undefined);
    try {
      done(null, JSON.parse(body));
    } catch (err) {
      done(Object.assign(err as Error, { statusCode: 400 }), undefined);
    }
  });
  app.setErrorHandler((err: Error & { statusCode?: number }, req, reply) => {
    if (err instanceof TapwardenError) return sendError(reply, err);
    const status = err.statusCode ?? 500;
    if (status >= 400 && status < 500) return reply.code(status).send(errorBody('TW_ERR_HTTP_BODY', `bad request: ${err.message}`));
    req.log.error({ err }, 'request failed');
    return sendError(reply, new TapwardenError('TW_ERR_INTERNAL', { detail: 'see the service log' }));
  });
  app.setNotFoundHandler((req, reply) => sendError(reply, new TapwardenError('TW_ERR_HTTP_NOT_FOUND', { method: req.method, url: req.url.split('?')[0]! })));
  for (const p of plugins) void app.register(p);
  return app;
}
