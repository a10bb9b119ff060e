/**
 * The PostgreSQL suites may be skipped on a developer's machine without a server, never in CI.
 */
import { describe, expect, it } from 'vitest';
import { isCi, postgresSkipReason } from './postgres.js';

// Port 1 on loopback: nothing listens there, so the connection is refused at once.
const NOWHERE = 'postgres://postgres@127.0.0.1:1/test';

describe('postgresSkipReason', () => {
  it('gives a reason to skip when no server answers outside CI', async () => {
    await expect(postgresSkipReason(NOWHERE, {})).resolves.toMatch(/no PostgreSQL at postgres:\/\/…@127\.0\.0\.1:1\/test/);
    await expect(postgresSkipReason(NOWHERE, { CI: 'false' })).resolves.toMatch(/no PostgreSQL/);
  });

  it('fails instead of skipping when CI=true', async () => {
    await expect(postgresSkipReason(NOWHERE, { CI: 'true' })).rejects.toThrow(/CI=true: the PostgreSQL suites must run in CI/);
    await expect(postgresSkipReason(NOWHERE, { CI: '1' })).rejects.toThrow(/must run in CI/);
  });

  it('reads CI the way CI services set it', () => {
    expect(isCi({ CI: 'true' })).toBe(true);
    expect(isCi({ CI: '1' })).toBe(true);
    expect(isCi({})).toBe(false);
    expect(isCi({ CI: '' })).toBe(false);
    expect(isCi({ CI: 'false' })).toBe(false);
    expect(isCi({ CI: '0' })).toBe(false);
  });
});
