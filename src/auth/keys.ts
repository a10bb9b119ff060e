/**
 * Issuing keys: a new token, its hash stored with the role and dataset limit, the token handed
 * back once. Shared by `roost keys` and `POST /v1/keys`.
 */
import type { ApiKey, Store } from '../storage/store.js';
import { isRole, type Role } from './roles.js';
import { hashToken, newKeyId, newToken } from './tokens.js';

export interface KeyRequest {
  role: Role;
  /** limit the key to this dataset (it must exist); null: any dataset */
  datasetId: string | null;
  label: string | null;
}

/** A new key with the only copy of its token. */
export interface IssuedKey {
  key: ApiKey;
  token: string;
}

/** Thrown for a key request that cannot be met; `field` names what is wrong. */
export class KeyRequestError extends Error {
  constructor(
    readonly field: 'role' | 'dataset' | 'label',
    message: string,
  ) {
    super(message);
    this.name = 'KeyRequestError';
  }
}

/** Checks a key request's fields as given by a user (command line or JSON). */
export function checkKeyRequest(input: { role?: unknown; dataset?: unknown; label?: unknown }): KeyRequest {
  if (!isRole(input.role)) throw new KeyRequestError('role', `role must be one of reader, contributor, manager, admin; got ${JSON.stringify(input.role ?? null)}`);
  if (input.dataset !== undefined && input.dataset !== null && (typeof input.dataset !== 'string' || !/^[A-Za-z0-9._~-]{1,128}$/.test(input.dataset))) {
    throw new KeyRequestError('dataset', `dataset must be a dataset id (1 to 128 characters from A-Z a-z 0-9 . _ ~ -) or null; got ${JSON.stringify(input.dataset)}`);
  }
  if (input.label !== undefined && input.label !== null && (typeof input.label !== 'string' || input.label.length > 200)) {
    throw new KeyRequestError('label', 'label must be text of at most 200 characters, or null');
  }
  return { role: input.role, datasetId: (input.dataset as string | null | undefined) ?? null, label: (input.label as string | null | undefined) ?? null };
}

/** Creates a key in the store. The token is returned here and never again. */
export async function issueKey(store: Store, request: KeyRequest): Promise<IssuedKey> {
  if (request.datasetId !== null && (await store.getDataset(request.datasetId)) === null) {
    throw new KeyRequestError('dataset', `there is no dataset ${JSON.stringify(request.datasetId)}; create it first, or leave the key unlimited`);
  }
  const token = newToken();
  const key = await store.createKey({ id: newKeyId(), tokenHash: hashToken(token), role: request.role, datasetId: request.datasetId, label: request.label });
  return { key, token };
}

/** A key as the API and `--json` show it (never with a token or hash). */
export function keyJson(k: ApiKey): Record<string, unknown> {
  return { id: k.id, role: k.role, dataset: k.datasetId, label: k.label, created_at: k.createdAt, revoked_at: k.revokedAt };
}
