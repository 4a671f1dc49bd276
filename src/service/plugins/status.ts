import type { FastifyPluginAsync, FastifyRequest } from 'fastify';
import { TapwardenError } from '../../errors.js';
import { sendError } from '../app.js';
import type { WeightsReply } from '../protocol.js';

export interface StatusDeps {
  status(): object;
  ready(): { ready: boolean; reason: string };
  weights(): Promise<WeightsReply>;
}

/** GET /healthz, /readyz, /api/status and /api/weights: read-only, open to anyone who can reach the port. */
export function statusPlugin(deps: StatusDeps): FastifyPluginAsync {
  return async (app) => {
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
            properties: { path: { enum: ['clean', 'adaptive'] }, channel: { type: 'string', pattern: '^[0-9]{1,3}$' } },
          },
        },
      },
      async (req: FastifyRequest<{ Querystring: { path: 'clean' | 'adaptive'; channel?: string } }>) => {
        const all = (await deps.weights()).channels;
        const { path } = req.query;
        const channel = req.query.channel === undefined ? undefined : Number(req.query.channel);
        const w = channel === undefined ? all[0]! : all.find((c) => c.channel === channel);
        if (w === undefined) {
          throw new TapwardenError('TW_ERR_HTTP_BODY', { detail: `channel ${channel} is not a measurement channel; allowed: ${all.map((c) => c.channel).join(', ')}` });
        }
        return { path, channel: w.channel, cleanVersion: w.cleanVersion, weights: path === 'clean' ? w.clean : w.adaptive };
      },
    );
  };
}
