/** A stored API key row, from either engine, as an ApiKey. */
import type { ApiKey } from './store.js';

/** A key row (either engine) as an ApiKey. */
export function keyFromRow(row: Record<string, unknown>): ApiKey {
  const iso = (v: unknown): string | null => (v === null || v === undefined ? null : v instanceof Date ? v.toISOString() : String(v));
  return {
    id: row.id as string,
    role: row.role as ApiKey['role'],
    datasetId: (row.dataset_id as string | null) ?? null,
    label: (row.label as string | null) ?? null,
    createdAt: iso(row.created_at)!,
    revokedAt: iso(row.revoked_at),
  };
}
