/**
 * Roles and the one permission check, as pure functions: no store, no HTTP.
 *
 * Roles are ordered; each includes everything the ones before it may do:
 * - `reader`: read observations, runs, layers, changes and tracks; cluster posted points;
 * - `contributor`: also post observations;
 * - `manager`: also change settings, schedules and webhooks, start and cancel runs, retract
 *   observations, delete the dataset;
 * - `admin`: also create datasets, manage keys and read the audit records.
 *
 * A key may be limited to one dataset. A limited key acts only on operations about that dataset
 * (and on clustering posted points, which touches no stored data); operations on the service as a
 * whole (creating datasets, keys, the audit records) need a key limited to no dataset.
 */

export const ROLES = ['reader', 'contributor', 'manager', 'admin'] as const;
export type Role = (typeof ROLES)[number];

const RANK: Record<Role, number> = { reader: 0, contributor: 1, manager: 2, admin: 3 };

/** Whether `text` names a role. */
export function isRole(text: unknown): text is Role {
  return typeof text === 'string' && (ROLES as readonly string[]).includes(text);
}

/** Who is asking: a key's role and dataset limit, or the open service (no keys exist). */
export interface Principal {
  /** the key's id; null when the service is open (no key in the store) */
  keyId: string | null;
  role: Role;
  /** the one dataset the key may act on; null: any */
  datasetId: string | null;
}

/**
 * What an operation needs:
 * - `role`: the lowest role allowed;
 * - `scope`: 'dataset' (about one dataset, named in the request), 'compute' (touches no stored
 *   data), 'service' (about the service as a whole) or 'listing' (a list of datasets or of what
 *   is in them, which the operation itself cuts to what the caller may read: see `mayRead`).
 */
export interface Requirement {
  role: Role;
  scope: 'dataset' | 'compute' | 'service' | 'listing';
}

/** Why a principal may not do something, or null when it may. */
export type Refusal = null | { reason: 'role' | 'dataset'; detail: string };

/**
 * Whether `who` may perform an operation needing `need`, on `datasetId` for dataset operations.
 * Returns null when allowed, else the reason, worded for a 403 answer.
 */
export function refusal(who: Principal, need: Requirement, datasetId: string | null = null): Refusal {
  if (RANK[who.role] < RANK[need.role]) {
    return { reason: 'role', detail: `this needs the ${need.role} role (or above); the key has ${who.role}` };
  }
  if (who.datasetId === null || need.scope === 'compute' || need.scope === 'listing') return null;
  if (need.scope === 'service') {
    return { reason: 'dataset', detail: `the key is limited to dataset ${JSON.stringify(who.datasetId)}; this needs a key for the whole service` };
  }
  if (datasetId !== who.datasetId) {
    return { reason: 'dataset', detail: `the key is limited to dataset ${JSON.stringify(who.datasetId)}` };
  }
  return null;
}

/** Whether `role` includes `needed`. */
export function roleIncludes(role: Role, needed: Role): boolean {
  return RANK[role] >= RANK[needed];
}

/**
 * Whether `who` may read dataset `datasetId` (its observations, runs and exact layers): what a
 * listing keeps. `null` is a caller without a key while keys exist: it reads no dataset (only
 * the published layers of public ones, which the listing decides itself).
 */
export function mayRead(who: Principal | null, datasetId: string): boolean {
  return who !== null && refusal(who, { role: 'reader', scope: 'dataset' }, datasetId) === null;
}
