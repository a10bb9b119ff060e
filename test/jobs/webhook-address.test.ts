/**
 * Webhook addresses: which receivers notices may go to, when the webhook is set and again at
 * every delivery. The ranges are those of the RFCs named beside each case.
 */
import { createServer } from 'node:http';
import type { LookupAddress } from 'node:dns';
import type { AddressInfo } from 'node:net';
import { describe, expect, it } from 'vitest';
import { deliverNotice } from '../../src/jobs/notify.js';
import { addressRefusal, checkWebhookAddress, checkWebhookUrl, guardedLookup, WebhookAddressError } from '../../src/jobs/webhook-address.js';

describe('address ranges', () => {
  const cases: [string, 'public' | 'private' | 'never'][] = [
    ['93.184.215.14', 'public'],
    ['2a00:1450:4001:81c::200e', 'public'],
    ['10.1.2.3', 'private'], // source: RFC 1918
    ['172.31.255.1', 'private'], // source: RFC 1918
    ['192.168.0.10', 'private'], // source: RFC 1918
    ['100.64.0.1', 'private'], // source: RFC 6598 shared address space
    ['127.0.0.1', 'private'], // source: RFC 1122 loopback 127/8
    ['127.8.9.10', 'private'],
    ['::1', 'private'], // source: RFC 4291 loopback
    ['::ffff:127.0.0.1', 'private'], // source: RFC 4291 §2.5.5.2, IPv4-mapped
    ['fd12:3456::1', 'private'], // source: RFC 4193 unique local
    ['169.254.169.254', 'never'], // source: RFC 3927 link-local, where cloud metadata services answer
    ['::ffff:169.254.169.254', 'never'],
    ['fe80::1', 'never'], // source: RFC 4291 link-local
    ['fd00:ec2::254', 'never'], // a cloud provider's IPv6 metadata address (from memory)
    ['0.0.0.0', 'never'], // source: RFC 1122 "this host"
    ['224.0.0.1', 'never'], // source: RFC 5771 multicast
    ['192.0.2.1', 'never'], // source: RFC 5737 documentation
    ['2001:db8::1', 'never'], // source: RFC 3849 documentation
    ['255.255.255.255', 'never'],
  ];
  for (const [ip, kind] of cases) {
    it(`${ip} is ${kind}`, () => {
      expect(addressRefusal(ip, false) === null).toBe(kind === 'public');
      expect(addressRefusal(ip, true) === null).toBe(kind !== 'never');
    });
  }
});

describe('webhook URLs', () => {
  const refused = (url: string, allowPrivate: boolean, words: RegExp) => {
    expect(() => checkWebhookUrl(url, allowPrivate), url).toThrow(WebhookAddressError);
    expect(() => checkWebhookUrl(url, allowPrivate), url).toThrow(words);
  };
  it('refuse the forms that reached internal services before', () => {
    refused('https://169.254.169.254/latest/meta-data/', true, /link|metadata/);
    refused('https://127.0.0.1:5432/', false, /loopback/);
    refused('https://[::1]:6379/', false, /loopback/);
    // the decimal and hexadecimal forms of 127.0.0.1 (WHATWG URL reads them as IPv4)
    refused('https://2130706433/internal/admin', false, /127\.0\.0\.1/);
    refused('https://0x7f.1/', false, /127\.0\.0\.1/);
    refused('https://user:pw@receiver.example.org/hook', true, /user name or password/);
    refused('https://user@receiver.example.org/hook', true, /user name or password/);
    refused('http://receiver.example.org/hook', false, /https/);
    refused('ftp://receiver.example.org/hook', true, /https/);
    refused('not a url', true, /absolute URL/);
    // http: with private webhooks goes to this machine only
    refused('http://10.0.0.5/hook', true, /not this machine/);
  });

  it('accept public https receivers, and loopback http ones with private webhooks allowed', () => {
    expect(checkWebhookUrl('https://receiver.example.org/hook', false).loopbackOnly).toBe(false);
    expect(checkWebhookUrl('https://93.184.215.14/hook', false).url.hostname).toBe('93.184.215.14');
    expect(checkWebhookUrl('http://127.0.0.1:9000/hook', true).loopbackOnly).toBe(true);
    expect(checkWebhookUrl('https://10.0.0.5/hook', true).loopbackOnly).toBe(false);
  });

  it('check every address a name resolves to', async () => {
    const resolver = (table: Record<string, string[]>) =>
      ((host: string, _o: unknown, cb: (e: NodeJS.ErrnoException | null, a: LookupAddress[]) => void) => {
        const a = table[host];
        if (!a) return cb(Object.assign(new Error('not found'), { code: 'ENOTFOUND' }), []);
        cb(null, a.map((address) => ({ address, family: address.includes(':') ? 6 : 4 })));
      }) as never;
    const dns = resolver({ 'good.example': ['93.184.215.14'], 'sneaky.example': ['93.184.215.14', '10.0.0.7'], 'meta.example': ['169.254.169.254'] });
    await expect(checkWebhookAddress('https://good.example/h', false, dns)).resolves.toBeTruthy();
    await expect(checkWebhookAddress('https://sneaky.example/h', false, dns)).rejects.toThrow(/10\.0\.0\.7/);
    await expect(checkWebhookAddress('https://meta.example/h', true, dns)).rejects.toThrow(/169\.254\.169\.254/);
    await expect(checkWebhookAddress('https://missing.example/h', false, dns)).rejects.toThrow(/cannot be resolved/);
    await expect(checkWebhookAddress('https://missing.example/h', false, dns, 'accept')).resolves.toBeTruthy();
    await expect(checkWebhookAddress('https://sneaky.example/h', false, dns, 'accept')).rejects.toThrow(/10\.0\.0\.7/);
  });

  it('check again at each connection: a name that now resolves to a private address is refused then', async () => {
    let answer = '93.184.215.14';
    const dns = ((_h: string, _o: unknown, cb: (e: null, a: LookupAddress[]) => void) => cb(null, [{ address: answer, family: 4 }])) as never;
    const lookup = guardedLookup(false, false, dns);
    const ask = () => new Promise<unknown>((resolve) => lookup('hooks.example', { all: true }, (err, a) => resolve(err ?? a)));
    expect(await ask()).toEqual([{ address: '93.184.215.14', family: 4 }]);
    answer = '127.0.0.1';
    expect(await ask()).toBeInstanceOf(WebhookAddressError);
  });
});

describe('delivery', () => {
  it('connects only to addresses that pass: a name resolving to loopback is refused without private webhooks, and delivered with them', async () => {
    let hits = 0;
    const server = createServer((_req, res) => {
      hits++;
      res.writeHead(204).end();
    });
    await new Promise<void>((r) => server.listen(0, '127.0.0.1', r));
    const port = (server.address() as AddressInfo).port;
    try {
      const fast = { attempts: 3, firstDelayMs: 1, maxDelayMs: 1, timeoutMs: 2000 };
      // https to a name that resolves to loopback: refused inside the connection's look-up, not retried
      const viaName = await deliverNotice({ url: `https://localhost:${port}/internal/admin`, secret: 's' }, '{}', fast);
      expect(viaName).toMatchObject({ delivered: false, attempts: 1, status: null });
      expect(viaName.error).toMatch(/refused|loopback/);
      // the literal address and its decimal form are refused before any connection
      const literal = await deliverNotice({ url: `http://2130706433:${port}/internal/admin`, secret: 's' }, '{}', fast);
      expect(literal).toMatchObject({ delivered: false, attempts: 1 });
      expect(hits).toBe(0);
      // with private webhooks allowed, http to this machine is delivered
      const allowed = await deliverNotice({ url: `http://localhost:${port}/hook`, secret: 's' }, '{}', { ...fast, allowPrivate: true });
      expect(allowed).toMatchObject({ delivered: true, status: 204 });
      expect(hits).toBe(1);
    } finally {
      server.closeAllConnections();
      await new Promise((r) => server.close(r));
    }
  });
});
