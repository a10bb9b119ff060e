/**
 * Opaque paging cursors and the pages that carry them (observations, audit records), for both
 * engines.
 */
import type { AuditPage, AuditRecord, ObservationPage } from './store.js';
import { StoreError } from './store.js';

/** Opaque cursor for a position in a sequence (base64url of a small JSON object). */
export function encodeCursor(seq: number): string {
  return Buffer.from(JSON.stringify({ s: seq })).toString('base64url');
}

/** @throws StoreError 'invalid' when the cursor was not made by `encodeCursor` */
export function decodeCursor(cursor: string): number {
  try {
    const v = JSON.parse(Buffer.from(cursor, 'base64url').toString('utf8')) as { s?: unknown };
    if (typeof v.s === 'number' && Number.isSafeInteger(v.s) && v.s >= 0) return v.s;
  } catch {
    // fall through to the error below
  }
  throw new StoreError('invalid', 'cursor is not one this service issued; start again without a cursor');
}

/** A page from rows (seq, feature, lon, lat) fetched with one row more than `limit`, the extra one telling that more follow. */
export function observationPage(rows: [number, string, number, number][], limit: number): ObservationPage {
  const more = rows.length > limit;
  if (more) rows.pop();
  const last = rows[rows.length - 1];
  return {
    features: rows.map((r) => r[1]),
    lon: rows.map((r) => r[2]),
    lat: rows.map((r) => r[3]),
    nextCursor: more && last !== undefined ? encodeCursor(last[0]) : null,
  };
}

/** Audit rows (either engine, newest first, one more than `limit` when there is a next page) as a page. */
export function auditPage(rows: Record<string, unknown>[], limit: number): AuditPage {
  const page = rows.slice(0, limit);
  const records: AuditRecord[] = page.map((row) => ({
    at: row.at instanceof Date ? row.at.toISOString() : String(row.at),
    keyId: (row.key_id as string | null) ?? null,
    actor: row.actor as AuditRecord['actor'],
    action: row.action as string,
    datasetId: (row.dataset_id as string | null) ?? null,
    target: (row.target as string | null) ?? null,
    status: Number(row.status),
  }));
  const last = page[page.length - 1];
  return { records, nextCursor: rows.length > limit && last !== undefined ? encodeCursor(Number(last.seq)) : null };
}
