/**
 * API key tokens: 256 random bits from the operating system's generator, shown once, stored only
 * as their SHA-256. A slow password hash (scrypt, bcrypt) is for secrets people choose; a token of
 * 256 random bits cannot be guessed, so a fast hash loses nothing and keeps every request's key
 * look-up cheap (common practice, no source).
 *
 * Form: `roost_` + 43 base64url characters (32 bytes). The prefix lets secret scanners and people
 * recognise a Roost token in a log or a repository.
 */
import { createHash, randomBytes } from 'node:crypto';

/** Prefix of every token. */
export const TOKEN_PREFIX = 'roost_';
/** Random bytes in a token (256 bits). */
export const TOKEN_BYTES = 32;

const TOKEN = /^roost_[A-Za-z0-9_-]{43}$/;
const KEY_ID = /^k_[0-9a-f]{12}$/;

/** A new token: `roost_` and 32 random bytes in base64url. */
export function newToken(): string {
  return TOKEN_PREFIX + randomBytes(TOKEN_BYTES).toString('base64url');
}

/** A new key id (`k_` and 12 hex digits): shown in listings and audit records, never secret. */
export function newKeyId(): string {
  return 'k_' + randomBytes(6).toString('hex');
}

/** Whether `text` has the form of a token (it may still be unknown or revoked). */
export function isTokenShaped(text: string): boolean {
  return TOKEN.test(text);
}

/** Whether `text` has the form of a key id. */
export function isKeyId(text: string): boolean {
  return KEY_ID.test(text);
}

/** The stored form of a token: SHA-256, lower-case hex. */
export function hashToken(token: string): string {
  return createHash('sha256').update(token, 'utf8').digest('hex');
}

/**
 * The token in an `Authorization` header value: `Bearer <token>` (scheme case-insensitive, as
 * RFC 9110 §11.1 has it). Returns null when there is no such header, and a string (possibly not
 * token-shaped) when one was given; `undefined` means the header was there but not a bearer token.
 */
export function bearerToken(header: string | string[] | undefined): string | null | undefined {
  if (header === undefined) return null;
  if (Array.isArray(header)) return undefined;
  const m = /^\s*bearer\s+(\S+)\s*$/i.exec(header);
  return m ? m[1]! : undefined;
}
