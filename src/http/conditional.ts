/**
 * Conditional GET (RFC 9110 §13): every layer and listing carries an `ETag`, and stored layers a
 * `Last-Modified` (the time their run finished); a request whose `If-None-Match` names the
 * current tag, or (without `If-None-Match`) whose `If-Modified-Since` is not older than
 * `Last-Modified`, is answered 304 with no body, so a GIS refreshing a layer by URL every
 * morning downloads it only when it changed.
 */
import { createHash } from 'node:crypto';
import type { FastifyReply, FastifyRequest } from 'fastify';

/** A strong entity tag of a body's bytes. */
export function etagOf(body: string | Buffer): string {
  return '"' + createHash('sha256').update(body).digest('base64url').slice(0, 32) + '"';
}

/** Whether an If-None-Match header value names the tag (weak comparison, RFC 9110 §13.1.2). */
export function noneMatch(header: string | undefined, etag: string): boolean {
  if (header === undefined) return false;
  const bare = etag.replace(/^W\//, '');
  return header.split(',').some((t) => {
    const tag = t.trim();
    return tag === '*' || tag.replace(/^W\//, '') === bare;
  });
}

/**
 * Sets ETag (and Last-Modified when given) and tells whether the request's conditions say the
 * client's copy is current (the caller then answers 304).
 * @param lastModified RFC 3339 or any Date.parse-able instant, or null
 */
export function notModified(request: FastifyRequest, reply: FastifyReply, etag: string, lastModified: string | null = null): boolean {
  void reply.header('etag', etag);
  let modifiedMs = NaN;
  if (lastModified !== null) {
    modifiedMs = Math.floor(Date.parse(lastModified) / 1000) * 1000;
    if (Number.isFinite(modifiedMs)) void reply.header('last-modified', new Date(modifiedMs).toUTCString());
  }
  const inm = request.headers['if-none-match'];
  if (inm !== undefined) return noneMatch(inm, etag);
  const ims = request.headers['if-modified-since'];
  if (ims !== undefined && Number.isFinite(modifiedMs)) {
    const since = Date.parse(ims);
    return Number.isFinite(since) && modifiedMs <= since;
  }
  return false;
}

/** Sends `body` with an ETag of its bytes, or 304 when the client's copy is current. */
export function sendTagged(request: FastifyRequest, reply: FastifyReply, type: string, body: string, lastModified: string | null = null): FastifyReply {
  if (notModified(request, reply, etagOf(body), lastModified)) return reply.code(304).send();
  return reply.type(type).send(body);
}

/** Adds a request header name to the answer's Vary, keeping what other parts (CORS: Origin) set. */
export function addVary(reply: FastifyReply, name: string): void {
  const current = reply.getHeader('vary');
  const names = (current === undefined ? '' : String(current)).split(',').map((v) => v.trim()).filter((v) => v !== '');
  if (names.some((v) => v === '*' || v.toLowerCase() === name.toLowerCase())) return;
  void reply.header('vary', [...names, name].join(', '));
}
