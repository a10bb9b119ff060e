/**
 * Request bodies: only the raw-bytes parser (body.ts), so bodies are never JSON.parse'd on the
 * main thread unless a route asks for a small JSON document itself. `app.uploads` counts the
 * bodies being received (each within its upload slot and deadline).
 */
import type { FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { BODY_MEDIA_TYPES, rawBodyParser, type UploadAllowance } from '../body.js';
import { DEFAULT_CONFIG } from '../config.js';

declare module 'fastify' {
  interface FastifyInstance {
    uploads: UploadAllowance;
  }
}

export interface BodiesOptions {
  /** largest accepted body in bytes */
  bodyLimitBytes: number;
  /** bodies received at once; default DEFAULT_CONFIG.uploads */
  uploads?: number;
  /** time allowed for a body to arrive, milliseconds; default DEFAULT_CONFIG.uploadTimeoutMs */
  uploadTimeoutMs?: number;
  /** seconds a turned-away client is asked to wait */
  retryAfterS?: number;
}

async function bodies(app: FastifyInstance, options: BodiesOptions): Promise<void> {
  const { parser, allowance } = rawBodyParser({
    limitBytes: options.bodyLimitBytes,
    uploads: options.uploads ?? DEFAULT_CONFIG.uploads,
    uploadTimeoutMs: options.uploadTimeoutMs ?? DEFAULT_CONFIG.uploadTimeoutMs,
    retryAfterS: options.retryAfterS ?? DEFAULT_CONFIG.retryAfterS,
  });
  app.decorate('uploads', allowance);
  app.removeAllContentTypeParsers();
  app.addContentTypeParser(Object.keys(BODY_MEDIA_TYPES), parser);
}

export default fp(bodies, { name: 'roost-bodies', fastify: '5.x' });
