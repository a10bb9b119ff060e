/**
 * Reading the service's API from the page. When the service has API keys, the visitor enters
 * one once; it is kept in this tab's session storage (gone when the tab closes) and sent as a
 * bearer token with every request.
 */

const KEY_ITEM = 'roost-api-key';

export class ApiError extends Error {
  constructor(
    readonly status: number,
    readonly problem: Record<string, unknown> | null,
  ) {
    super(problem && typeof problem.detail === 'string' ? problem.detail : `the service answered ${status}`);
  }
}

export function storedKey(): string | null {
  return sessionStorage.getItem(KEY_ITEM);
}

export function storeKey(key: string | null): void {
  if (key === null || key.trim() === '') sessionStorage.removeItem(KEY_ITEM);
  else sessionStorage.setItem(KEY_ITEM, key.trim());
}

export async function getJson<T>(url: string, init: RequestInit = {}): Promise<T> {
  const key = storedKey();
  const headers: Record<string, string> = { accept: 'application/json, application/geo+json', ...((init.headers as Record<string, string>) ?? {}) };
  if (key) headers.authorization = `Bearer ${key}`;
  const res = await fetch(url, { ...init, headers });
  const text = await res.text();
  const body = text ? (JSON.parse(text) as unknown) : null;
  if (!res.ok) throw new ApiError(res.status, body as Record<string, unknown> | null);
  return body as T;
}
