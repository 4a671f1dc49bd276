import { timingSafeEqual } from 'node:crypto';
import Fastify, { type FastifyInstance, type FastifyReply, type FastifyRequest } from 'fastify';
import { TapwardenError, type ErrorCode } from '../errors.js';
import type { ControlOp, WeightsReply } from './protocol.js';

export interface HttpDeps {
  readonly logLevel: string;
  readonly token: string | null;
  metricsText(): Promise<string>;
  readonly metricsContentType: string;
  status(): object;
  ready(): { ready: boolean; reason: string };
  weights(): Promise<WeightsReply>;
  control(op: ControlOp): Promise<WeightsReply>;
}

function errorBody(code: ErrorCode, message: string) {
  return { error: { code, message } };
}

function sendError(reply: FastifyReply, err: TapwardenError): FastifyReply {
  return reply.code(err.httpStatus ?? 500).send(errorBody(err.code, err.message));
}

function tokensEqual(a: string, b: string): boolean {
  const x = Buffer.from(a);
  const y = Buffer.from(b);
  return x.length === y.length && timingSafeEqual(x, y);
}

const frozenBody = {
  type: 'object',
  additionalProperties: false,
  required: ['frozen'],
  properties: { frozen: { type: 'boolean' } },
} as const;
const emptyBody = { type: 'object', additionalProperties: false, properties: {} } as const;

/**
 * The HTTP surface. Read-only routes are open; control routes need the configured bearer token
 * and are refused outright when none is configured. Every error is one JSON object with a code.
 */
export function buildApp(deps: HttpDeps): FastifyInstance {
  const app = Fastify({
    logger: { level: deps.logLevel },
    bodyLimit: 16 * 1024,
    ajv: { customOptions: { removeAdditional: false, coerceTypes: false, allErrors: false } },
  });

  app.setErrorHandler((err: Error & { statusCode?: number; validation?: unknown }, req, reply) => {
    if (err instanceof TapwardenError) return sendError(reply, err);
    const status = err.statusCode ?? 500;
    if (status >= 400 && status < 500) {
      return reply.code(status).send(errorBody('TW_ERR_HTTP_BODY', `bad request: ${err.message}`));
    }
    req.log.error({ err }, 'request failed');
    return sendError(reply, new TapwardenError('TW_ERR_INTERNAL', { detail: 'see the service log' }));
  });
  app.setNotFoundHandler((req, reply) =>
    sendError(reply, new TapwardenError('TW_ERR_HTTP_NOT_FOUND', { method: req.method, url: req.url.split('?')[0]! })),
  );

  app.get('/metrics', async (_req, reply) => reply.type(deps.metricsContentType).send(await deps.metricsText()));
  app.get('/healthz', async () => ({ status: 'alive' }));
  app.get('/readyz', async (_req, reply) => {
    const r = deps.ready();
    if (!r.ready) return sendError(reply, new TapwardenError('TW_ERR_NOT_READY', { reason: r.reason }));
    return { status: 'ready' };
  });
  app.get('/api/status', async () => deps.status());
  app.get(
    '/api/weights',
    {
      schema: {
        querystring: {
          type: 'object',
          additionalProperties: false,
          required: ['path'],
          properties: { path: { enum: ['clean', 'adaptive'] } },
        },
      },
    },
    async (req: FastifyRequest<{ Querystring: { path: 'clean' | 'adaptive' } }>) => {
      const w = await deps.weights();
      const path = req.query.path;
      return { path, cleanVersion: w.cleanVersion, weights: path === 'clean' ? w.clean : w.adaptive };
    },
  );

  app.register(async (control) => {
    control.addHook('onRequest', async (req, reply) => {
      if (deps.token === null) return sendError(reply, new TapwardenError('TW_ERR_AUTH_NOT_CONFIGURED'));
      const given = /^Bearer (.+)$/.exec(req.headers.authorization ?? '')?.[1];
      if (given === undefined || !tokensEqual(given, deps.token)) {
        reply.header('www-authenticate', 'Bearer realm="tapwarden control"');
        return sendError(reply, new TapwardenError('TW_ERR_AUTH_TOKEN'));
      }
    });
    const route = (path: string, body: object | null, op: (b: { frozen: boolean }) => ControlOp) =>
      control.post(path, body ? { schema: { body } } : {}, async (req: FastifyRequest<{ Body: { frozen: boolean } }>) => {
        const reply = await deps.control(op(req.body));
        req.log.info({ control: path, body: req.body ?? null }, 'control request applied');
        return { ok: true, cleanVersion: reply.cleanVersion, adapting: reply.adapting, handoffsHeld: reply.handoffsHeld };
      });
    route('/api/control/handoff', emptyBody, () => ({ kind: 'handoff' }));
    route('/api/control/rollback', emptyBody, () => ({ kind: 'rollback' }));
    route('/api/control/reset', emptyBody, () => ({ kind: 'reset' }));
    route('/api/control/adaptation', frozenBody, (b) => ({ kind: 'adaptation', frozen: b.frozen }));
    route('/api/control/handoffs', frozenBody, (b) => ({ kind: 'handoffs', frozen: b.frozen }));
  });
  return app;
}
