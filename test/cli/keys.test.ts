import { spawnSync } from 'node:child_process';
import { mkdtempSync, rmSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { afterAll, describe, expect, it } from 'vitest';
import { hashToken } from '../../src/auth/tokens.js';
import { keysCommand } from '../../src/cli/keys.js';
import { openStore } from '../../src/storage/index.js';

/** Folders the tests write into, removed when the file's tests are done. */
const made: string[] = [];
afterAll(() => {
  for (const dir of made) rmSync(dir, { recursive: true, force: true });
});
const tmp = (): string => {
  const dir = mkdtempSync(join(tmpdir(), 'roost-keys-'));
  made.push(dir);
  return dir;
};

const BIN = new URL('../../dist/cli/bin.js', import.meta.url).pathname;

async function keys(args: string[], db: string): Promise<{ code: number; out: string; err: string }> {
  let code = -1;
  let out = '';
  let err = '';
  const cmd = keysCommand((c) => (code = c), { out: (t) => (out += t), err: (t) => (err += t) }, {});
  cmd.exitOverride();
  for (const sub of cmd.commands) sub.exitOverride();
  await cmd.parseAsync([...args, '--db', db], { from: 'user' });
  return { code, out, err };
}

describe('roost keys', () => {
  it('create prints the token once; the store holds only its hash; list and revoke work by id', async () => {
    const db = join(tmp(), 'k.db');
    const store = await openStore({ sqlitePath: db });
    await store.createDataset({ id: 'herons', name: 'Herons', settings: {}, idProperty: null, window: null, schedule: null, webhook: null });
    await store.close();

    const made = await keys(['create', '--role', 'contributor', '--dataset', 'herons', '--label', 'phones', '--json'], db);
    expect(made.code).toBe(0);
    const doc = JSON.parse(made.out);
    expect(Object.keys(doc).sort()).toEqual(['dataset', 'id', 'label', 'role', 'token']);
    expect(doc).toMatchObject({ role: 'contributor', dataset: 'herons', label: 'phones' });

    const check = await openStore({ sqlitePath: db });
    expect((await check.findKey(hashToken(doc.token)))?.id).toBe(doc.id);
    // the token itself is nowhere in the database's key rows
    const rows = (check as unknown as { db: { prepare(s: string): { all(): unknown[] } } }).db.prepare('SELECT * FROM api_keys').all();
    expect(JSON.stringify(rows)).not.toContain(doc.token);
    expect(JSON.stringify(rows)).toContain(hashToken(doc.token));
    await check.close();

    const listed = await keys(['list', '--json'], db);
    expect(listed.code).toBe(0);
    expect(listed.out).not.toContain(doc.token);
    expect(JSON.parse(listed.out)).toEqual([expect.objectContaining({ id: doc.id, role: 'contributor', dataset: 'herons', revoked_at: null })]);

    const revoked = await keys(['revoke', doc.id], db);
    expect(revoked.code).toBe(0);
    const after = await openStore({ sqlitePath: db });
    expect(await after.findKey(hashToken(doc.token))).toBeNull();
    const audit = await after.listAudit({ limit: 10 });
    expect(audit.records.map((r) => [r.actor, r.action, r.target])).toEqual([
      ['command', 'roost keys revoke', doc.id],
      ['command', 'roost keys create', doc.id],
    ]);
    await after.close();
  });

  it('refuses an unknown dataset, an unknown key and a missing role with exit code 2', async () => {
    const db = join(tmp(), 'k.db');
    const unknownDs = await keys(['create', '--role', 'reader', '--dataset', 'nope'], db);
    expect(unknownDs.code).toBe(2);
    expect(unknownDs.err).toContain('there is no dataset "nope"');
    expect(unknownDs.out).toBe('');
    const unknownKey = await keys(['revoke', 'k_0123456789ab'], db);
    expect(unknownKey.code).toBe(2);
    expect(unknownKey.err).toContain('no key "k_0123456789ab"');
    const r = spawnSync(process.execPath, [BIN, 'keys', 'create', '--db', db], { encoding: 'utf8' });
    expect(r.status).not.toBe(0);
    expect(r.stderr).toContain('--role');
  });

  it('the installed command prints the token alone on the first line of stdout', () => {
    const db = join(tmp(), 'k.db');
    const r = spawnSync(process.execPath, [BIN, 'keys', 'create', '--role', 'admin', '--db', db], { encoding: 'utf8', env: { ...process.env, DATABASE_URL: '' } });
    expect(r.status, r.stderr).toBe(0);
    expect(r.stdout.split('\n')[0]).toMatch(/^roost_[A-Za-z0-9_-]{43}$/);
    expect(r.stderr).toContain('shown only this once');
  });
});
