/**
 * The PostgreSQL server the tests use: DATABASE_URL when it names PostgreSQL, else the CI database
 * on this machine (trust auth). Suites that need it are skipped — with the reason in their name
 * and a warning — when it does not answer; CI starts it, so there they always run.
 */
import pg from 'pg';

export const TEST_DATABASE_URL =
  process.env.DATABASE_URL !== undefined && /^postgres(ql)?:\/\//.test(process.env.DATABASE_URL)
    ? process.env.DATABASE_URL
    : 'postgres://postgres@127.0.0.1:5432/test';

/** null when the server answers, else why not (credentials left out). */
export async function postgresSkipReason(url = TEST_DATABASE_URL): Promise<string | null> {
  const c = new pg.Client({ connectionString: url, connectionTimeoutMillis: 3000 });
  try {
    await c.connect();
    await c.query('SELECT 1');
    return null;
  } catch (e) {
    return `no PostgreSQL at ${url.replace(/\/\/[^@]*@/, '//…@')}: ${(e as Error).message}`;
  } finally {
    await c.end().catch(() => undefined);
  }
}
