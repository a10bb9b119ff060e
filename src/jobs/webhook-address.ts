/**
 * Where notices may go. A webhook is a request the service makes on a user's behalf, so it must
 * not reach what only the service can reach (OWASP API Security Top 10 2023, API7 server-side
 * request forgery): the cloud metadata service, databases on the same machine, the private
 * network.
 *
 * Rules:
 * - `https:` only; `http:` only when private webhooks are allowed and the host is this machine
 *   (every address it resolves to is loopback).
 * - No user name or password in the URL: the signing secret authenticates notices, and a
 *   credential in a URL ends up in logs and listings.
 * - Every address the host resolves to must be an ordinary public unicast address. Private
 *   (RFC 1918), loopback, unique-local and shared (RFC 6598) addresses are allowed only with
 *   `allowPrivate`; link-local (169.254.0.0/16 and fe80::/10, where cloud metadata services
 *   answer), unspecified, multicast, reserved, documentation and translated ranges never are.
 *   Ranges are classified by `ipaddr.js`, IPv4-mapped IPv6 addresses as their IPv4 address.
 *   Numeric forms such as `2130706433` or `0x7f.1` are read by the WHATWG URL parser as the
 *   IPv4 address they mean before any check.
 * - The check is made when the webhook is set and again at every delivery, inside the
 *   connection's own name look-up (`guardedLookup`), so the address connected to is the address
 *   checked: a name that later resolves elsewhere (DNS rebinding) is refused at that moment.
 */
import { lookup as dnsLookup, type LookupAddress, type LookupAllOptions, type LookupOptions } from 'node:dns';
import { isIP } from 'node:net';
import ipaddr from 'ipaddr.js';

/** Why a webhook address was refused; the message says what to do. */
export class WebhookAddressError extends Error {
  constructor(message: string) {
    super(message);
    this.name = 'WebhookAddressError';
  }
}

/**
 * Addresses of cloud metadata and host services that are refused even with allowPrivate
 * (from memory, the providers' documented addresses: AWS IPv6 metadata, Alibaba Cloud metadata,
 * Azure's host service; the IPv4 metadata address 169.254.169.254 is link-local anyway).
 */
const ALWAYS_REFUSED = new Set(['fd00:ec2::254', '100.100.100.200', '168.63.129.16']);

const PRIVATE_RANGES = new Set(['private', 'loopback', 'uniqueLocal', 'carrierGradeNat']);

/** The reason an IP address may not receive notices, or null when it may. */
export function addressRefusal(ip: string, allowPrivate: boolean, loopbackOnly = false): string | null {
  let addr: ipaddr.IPv4 | ipaddr.IPv6;
  try {
    addr = ipaddr.parse(ip.replace(/^\[|\]$/g, '').replace(/%.*$/, ''));
  } catch {
    return `${ip} is not an IP address`;
  }
  if (addr.kind() === 'ipv6' && (addr as ipaddr.IPv6).isIPv4MappedAddress()) addr = (addr as ipaddr.IPv6).toIPv4Address();
  const text = addr.toString();
  const range = addr.range();
  if (ALWAYS_REFUSED.has(text)) return `${text} is a cloud metadata or host service address`;
  if (loopbackOnly) return range === 'loopback' ? null : `${text} is not this machine (http: webhooks may only go to loopback)`;
  if (range === 'unicast') return null;
  if (PRIVATE_RANGES.has(range)) return allowPrivate ? null : `${text} is a ${range === 'loopback' ? 'loopback' : 'private-network'} address (start the service with --allow-private-webhooks to allow it)`;
  return `${text} is in the ${range} range, which never receives notices`;
}

/** A checked webhook URL and whether only loopback addresses may be connected to. */
export interface CheckedWebhookUrl {
  url: URL;
  loopbackOnly: boolean;
}

/** The checks that need no name look-up: scheme, credentials, a literal address's range. */
export function checkWebhookUrl(text: string, allowPrivate: boolean): CheckedWebhookUrl {
  let url: URL;
  try {
    url = new URL(text);
  } catch {
    throw new WebhookAddressError('the webhook url is not an absolute URL such as https://receiver.example.org/roost');
  }
  if (url.username !== '' || url.password !== '') {
    throw new WebhookAddressError('the webhook url carries a user name or password; remove it: notices are authenticated by the signing secret');
  }
  let loopbackOnly = false;
  if (url.protocol === 'http:') {
    if (!allowPrivate) throw new WebhookAddressError('the webhook url must use https: (http: is allowed only to this machine, with --allow-private-webhooks)');
    loopbackOnly = true;
  } else if (url.protocol !== 'https:') {
    throw new WebhookAddressError(`the webhook url must use https:, not ${url.protocol}`);
  }
  const host = url.hostname.replace(/^\[|\]$/g, '');
  if (host === '') throw new WebhookAddressError('the webhook url has no host');
  if (isIP(host) !== 0) {
    const why = addressRefusal(host, allowPrivate, loopbackOnly);
    if (why !== null) throw new WebhookAddressError(`the webhook address is refused: ${why}`);
  }
  return { url, loopbackOnly };
}

type LookupCallback = (err: NodeJS.ErrnoException | null, address: string | LookupAddress[], family?: number) => void;
type Lookup = (hostname: string, options: LookupOptions, callback: LookupCallback) => void;

/**
 * A `lookup` for sockets (net/tls `connect` options) that resolves as usual and fails with a
 * WebhookAddressError when any address found is refused.
 */
export function guardedLookup(allowPrivate: boolean, loopbackOnly: boolean, resolve: typeof dnsLookup = dnsLookup): Lookup {
  return (hostname, options, callback) => {
    resolve(hostname, { ...options, all: true } as LookupAllOptions, (err, addresses) => {
      if (err) return callback(err, options.all ? [] : '', 0);
      const list = addresses as LookupAddress[];
      if (list.length === 0) return callback(Object.assign(new Error(`${hostname} has no address`), { code: 'ENOTFOUND' }), options.all ? [] : '', 0);
      for (const a of list) {
        const why = addressRefusal(a.address, allowPrivate, loopbackOnly);
        if (why !== null) return callback(new WebhookAddressError(`${hostname} resolves to a refused address: ${why}`), options.all ? [] : '', 0);
      }
      if (options.all) callback(null, list);
      else callback(null, list[0]!.address, list[0]!.family);
    });
  };
}

/**
 * Checks a webhook URL fully: the checks of checkWebhookUrl, then every address its host
 * resolves to. Throws WebhookAddressError when refused, and when the name does not resolve unless
 * `unresolved` is 'accept' (a name may be registered later; every delivery checks again).
 */
export async function checkWebhookAddress(
  text: string,
  allowPrivate: boolean,
  resolve: typeof dnsLookup = dnsLookup,
  unresolved: 'refuse' | 'accept' = 'refuse',
): Promise<CheckedWebhookUrl> {
  const checked = checkWebhookUrl(text, allowPrivate);
  const host = checked.url.hostname.replace(/^\[|\]$/g, '');
  if (isIP(host) !== 0) return checked;
  await new Promise<void>((ok, fail) => {
    guardedLookup(allowPrivate, checked.loopbackOnly, resolve)(host, { all: true }, (err) => {
      if (err === null) return ok();
      if (err instanceof WebhookAddressError) return fail(err);
      if (unresolved === 'accept') return ok();
      fail(new WebhookAddressError(`the webhook host ${host} cannot be resolved (${err.code ?? err.message})`));
    });
  });
  return checked;
}
