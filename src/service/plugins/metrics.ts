import type { FastifyPluginAsync } from 'fastify';
import type { ServiceMetrics } from '../metrics.js';

/** GET /metrics: the Prometheus text exposition. */
export function metricsPlugin(metrics: ServiceMetrics): FastifyPluginAsync {
  return async (app) => {
    app.get('/metrics', async (_req, reply) => reply.type(metrics.registry.contentType).send(await metrics.registry.metrics()));
  };
}
