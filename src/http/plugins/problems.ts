/**
 * Every error leaves as an RFC 9457 problem: one error handler mapping thrown errors to the
 * catalogue (errors.ts), a not-found handler, and the request id on every answer.
 */
import type { FastifyError, FastifyInstance } from 'fastify';
import fp from 'fastify-plugin';
import { BODY_MEDIA_TYPES } from '../body.js';
import { DEFAULT_CONFIG } from '../config.js';
import { HttpProblem, PROBLEM_MEDIA_TYPE } from '../errors.js';

/**
 * Database errors that mean "held up by other work, try again", not "broken": SQLite's lock still
 * taken when the store's wait for it ran out (SQLITE_BUSY and its extended codes), PostgreSQL's
 * lock_not_available (55P03), serialization_failure (40001) and deadlock_detected (40P01).
 * source: https://www.sqlite.org/rescode.html#busy; PostgreSQL 15 manual, Appendix A "PostgreSQL Error Codes".
 */
export function isStoreContention(err: unknown): boolean {
  const code = (err as { code?: unknown } | null)?.code;
  if (typeof code !== 'string') return false;
  return code.startsWith('SQLITE_BUSY') || code === '55P03' || code === '40001' || code === '40P01';
}

/** The problem an error is answered with; anything unforeseen is a 500 that hides its cause. */
export function problemFor(err: FastifyError | Error): HttpProblem {
  if (err instanceof HttpProblem) return err;
  const e = err as FastifyError;
  if (e.code === 'FST_ERR_CTP_BODY_TOO_LARGE') return new HttpProblem('body-too-large', 'The request body is larger than this service accepts.');
  if (e.code === 'FST_ERR_CTP_INVALID_MEDIA_TYPE') {
    return new HttpProblem(
      'unsupported-media-type',
      `This endpoint reads ${Object.keys(BODY_MEDIA_TYPES).join(', ')}; set Content-Type to one of them.`,
    );
  }
  if (e.validation) return new HttpProblem('invalid-parameter', e.message);
  if (isStoreContention(err)) {
    return new HttpProblem(
      'overloaded',
      'The database was held by other work for longer than this service waits for it. Try again after Retry-After seconds.',
      {},
      { 'retry-after': String(DEFAULT_CONFIG.retryAfterS) },
    );
  }
  if (typeof e.statusCode === 'number' && e.statusCode >= 400 && e.statusCode < 500) {
    return new HttpProblem('bad-request', e.message);
  }
  return new HttpProblem('internal-error', 'The service failed to answer this request. Quote the request_id when reporting it.');
}

async function problems(app: FastifyInstance): Promise<void> {
  app.addHook('onRequest', async (request, reply) => {
    reply.header('x-request-id', request.id);
  });

  app.setErrorHandler((err: FastifyError, request, reply) => {
    const problem = problemFor(err);
    if (problem.status === 503 || problem.status === 504) {
      // load shedding, a full queue, shutting down or a time limit: the service working as meant
      request.log.warn({ code: problem.code, detail: problem.message }, 'request turned away');
    } else if (problem.status >= 500) {
      request.log.error({ err }, 'request failed');
    } else {
      request.log.info({ code: problem.code, detail: problem.message }, 'request refused');
    }
    void reply
      .code(problem.status)
      .headers(problem.headers)
      .type(PROBLEM_MEDIA_TYPE)
      .send(JSON.stringify(problem.body(String(request.id))));
  });

  app.setNotFoundHandler((request) => {
    throw new HttpProblem('not-found', `There is no ${request.method} ${request.url.split('?')[0]}; see /openapi.yaml for the routes.`);
  });
}

export default fp(problems, { name: 'roost-problems', fastify: '5.x' });
