/**
 * Request bodies: only the raw-bytes parser (body.ts), so bodies are never JSON.parse'd on the
 * main thread unless a route asks for a small JSON document itself.
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { BODY_MEDIA_TYPES, rawBodyParser } from '../body.js';

export interface BodiesOptions {
  /** largest accepted body in bytes */
  bodyLimitBytes: number;
}

async function bodies(app: FastifyInstance, options: BodiesOptions): Promise<void> {
  app.removeAllContentTypeParsers();
  app.addContentTypeParser(Object.keys(BODY_MEDIA_TYPES), rawBodyParser(options.bodyLimitBytes));
}

export default fp(bodies, { name: 'roost-bodies', fastify: '5.x' });
