/** The edge checks and headers (see ../edge.ts) as a plugin reaching every route registered after it. */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import type { ServerConfig } from '../config.js';
import { registerEdge } from '../edge.js';

async function edgePlugin(app: FastifyInstance, options: { config: ServerConfig }): Promise<void> {
  await registerEdge(app, options.config);
}

export default fp(edgePlugin, { name: 'roost-edge', fastify: '5.x' });
