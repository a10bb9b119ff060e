/** Reading the service's API from the page. */

export class ApiError extends Error {
  constructor(
    readonly status: number,
    readonly problem: Record<string, unknown> | null,
  ) {
    super(problem && typeof problem.detail === 'string' ? problem.detail : `the service answered ${status}`);
  }
}

export async function getJson<T>(url: string, init: RequestInit = {}): Promise<T> {
  const res = await fetch(url, { ...init, headers: { accept: 'application/json, application/geo+json', ...(init.headers ?? {}) } });
  const text = await res.text();
  const body = text ? (JSON.parse(text) as unknown) : null;
  if (!res.ok) throw new ApiError(res.status, body as Record<string, unknown> | null);
  return body as T;
}
