import { describe, expect, it } from 'vitest';
import { isLoopbackHost, startupAccess } from '../../src/http/open-mode.js';

describe('start-up without keys', () => {
  it('knows loopback listening addresses', () => {
    // source: RFC 1122 §3.2.1.3 (127/8), RFC 4291 §2.5.3 (::1)
    for (const h of ['127.0.0.1', '127.1.2.3', '::1', '[::1]', 'localhost', '::ffff:127.0.0.1']) expect(isLoopbackHost(h), h).toBe(true);
    for (const h of ['0.0.0.0', '::', '192.168.1.5', '10.0.0.1', 'roost.example.org', '8.8.8.8']) expect(isLoopbackHost(h), h).toBe(false);
  });

  it('stays open on loopback, refuses other addresses unless --open, and needs nothing once a key exists', () => {
    expect(startupAccess('127.0.0.1', 0, false)).toMatchObject({ ok: true, level: 'info' });
    expect(startupAccess('127.0.0.1', 0, false).message).toContain('open to anyone on this machine');
    const refused = startupAccess('0.0.0.0', 0, false);
    expect(refused).toMatchObject({ ok: false, level: 'error' });
    expect(refused.message).toContain('roost keys create --role admin');
    expect(refused.message).toContain('--open');
    expect(startupAccess('0.0.0.0', 0, true)).toMatchObject({ ok: true, level: 'warn' });
    expect(startupAccess('0.0.0.0', 2, false)).toMatchObject({ ok: true, level: 'info', message: 'API keys are required (2 in force)' });
  });
});

describe('the server', () => {
  it('refuses to listen beyond loopback with no key, before listening, and says how to create one', async () => {
    const { startServer } = await import('../../src/http/server.js');
    const { testConfig } = await import('./helper.js');
    await expect(startServer(testConfig({ host: '0.0.0.0', port: 0 }), { handleSignals: false })).rejects.toThrow(/roost keys create --role admin/);
  });
});
