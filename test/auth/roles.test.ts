import { describe, expect, it } from 'vitest';
import { mayRead, refusal, roleIncludes, ROLES, type Principal, type Requirement, type Role } from '../../src/auth/roles.js';
import { bearerToken, hashToken, isTokenShaped, newKeyId, newToken } from '../../src/auth/tokens.js';

// The role table as the product brief states it (shared/product.md, "key, role"), written out by
// hand: which role may do what. The order of ROLES is not used to build it.
const MAY: Record<Role, Role[]> = {
  reader: ['reader'],
  contributor: ['reader', 'contributor'],
  manager: ['reader', 'contributor', 'manager'],
  admin: ['reader', 'contributor', 'manager', 'admin'],
};

describe('roles', () => {
  it('each role may do what the roles below it may, and nothing above', () => {
    for (const have of ROLES) for (const need of ROLES) expect(roleIncludes(have, need), `${have} → ${need}`).toBe(MAY[have].includes(need));
  });

  it('an unlimited key passes wherever its role does, on every scope', () => {
    for (const have of ROLES) {
      for (const need of ROLES) {
        for (const scope of ['dataset', 'compute', 'service', 'listing'] as const) {
          const who: Principal = { keyId: 'k_000000000001', role: have, datasetId: null };
          const r = refusal(who, { role: need, scope }, 'herons');
          expect(r === null, `${have} ${need} ${scope}`).toBe(MAY[have].includes(need));
          if (r !== null) expect(r.reason).toBe('role');
        }
      }
    }
  });

  it('a key limited to one dataset acts on that dataset and on posted points only', () => {
    const who: Principal = { keyId: 'k_000000000001', role: 'admin', datasetId: 'herons' };
    const on = (need: Requirement, ds: string | null) => refusal(who, need, ds);
    expect(on({ role: 'manager', scope: 'dataset' }, 'herons')).toBeNull();
    expect(on({ role: 'reader', scope: 'dataset' }, 'egrets')?.reason).toBe('dataset');
    expect(on({ role: 'reader', scope: 'dataset' }, null)?.reason).toBe('dataset');
    expect(on({ role: 'reader', scope: 'compute' }, null)).toBeNull();
    expect(on({ role: 'admin', scope: 'service' }, null)?.reason).toBe('dataset');
    // the role is checked first: a limited reader asking to manage is refused for its role
    expect(refusal({ ...who, role: 'reader' }, { role: 'manager', scope: 'dataset' }, 'egrets')?.reason).toBe('role');
    // a listing lets it through; what it lists is cut by mayRead
    expect(on({ role: 'reader', scope: 'listing' }, null)).toBeNull();
  });

  it('mayRead: what a listing keeps for a caller', () => {
    expect(mayRead({ keyId: 'k_000000000001', role: 'reader', datasetId: 'herons' }, 'herons')).toBe(true);
    expect(mayRead({ keyId: 'k_000000000001', role: 'reader', datasetId: 'herons' }, 'egrets')).toBe(false);
    expect(mayRead({ keyId: 'k_000000000001', role: 'reader', datasetId: null }, 'egrets')).toBe(true);
    expect(mayRead({ keyId: null, role: 'admin', datasetId: null }, 'egrets')).toBe(true);
    // no key while keys exist: no dataset (a public dataset's published layers are decided apart)
    expect(mayRead(null, 'herons')).toBe(false);
  });
});

describe('tokens', () => {
  it('are 256 random bits behind a prefix, distinct, and stored as SHA-256', () => {
    const seen = new Set<string>();
    for (let i = 0; i < 200; i++) {
      const t = newToken();
      expect(isTokenShaped(t)).toBe(true);
      expect(Buffer.from(t.slice('roost_'.length), 'base64url')).toHaveLength(32);
      seen.add(t);
    }
    expect(seen.size).toBe(200);
    expect(newKeyId()).toMatch(/^k_[0-9a-f]{12}$/);
    // source: FIPS 180-4 / NIST CSRC example values, SHA-256("abc") (from memory, widely quoted)
    expect(hashToken('abc')).toBe('ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad');
  });

  it('are read from a bearer Authorization header only', () => {
    expect(bearerToken(undefined)).toBeNull();
    expect(bearerToken('Bearer abc')).toBe('abc');
    expect(bearerToken('bearer  abc ')).toBe('abc');
    expect(bearerToken('Basic dXNlcjpwdw==')).toBeUndefined();
    expect(bearerToken('Bearer')).toBeUndefined();
    expect(bearerToken('Bearer a b')).toBeUndefined();
    expect(bearerToken(['Bearer a', 'Bearer b'])).toBeUndefined();
  });
});
