/**
 * Whether the service may start without API keys. With no key in the store it is open to anyone
 * who can reach it: fine on one's own machine (loopback), refused on any other address unless the
 * operator says `--open` on purpose.
 */
import { isIP } from 'node:net';
import ipaddr from 'ipaddr.js';

/** Whether `host` (a listening address or name) reaches this machine only. */
export function isLoopbackHost(host: string): boolean {
  const h = host.trim().toLowerCase().replace(/^\[|\]$/g, '');
  if (h === 'localhost') return true;
  if (isIP(h) === 0) return false;
  let addr = ipaddr.parse(h);
  if (addr.kind() === 'ipv6' && (addr as ipaddr.IPv6).isIPv4MappedAddress()) addr = (addr as ipaddr.IPv6).toIPv4Address();
  return addr.range() === 'loopback';
}

/** What start-up says about access, and whether it may go on. */
export interface StartupAccess {
  ok: boolean;
  level: 'info' | 'warn' | 'error';
  message: string;
}

/** The start-up decision for listening on `host` with `keys` keys in force. */
export function startupAccess(host: string, keys: number, open: boolean): StartupAccess {
  if (keys > 0) return { ok: true, level: 'info', message: `API keys are required (${keys} in force)` };
  if (isLoopbackHost(host)) {
    return { ok: true, level: 'info', message: `no API key in the store: the service is open to anyone on this machine (${host}); create one with "roost keys create --role admin" to require keys` };
  }
  if (open) {
    return { ok: true, level: 'warn', message: `--open: no API key in the store and listening on ${host}: anyone who can reach it may read, change and delete every dataset` };
  }
  return {
    ok: false,
    level: 'error',
    message: `refusing to listen on ${host} with no API key in the store: anyone who can reach it could read, change and delete every dataset. Create a key first ("roost keys create --role admin", with the same --db or DATABASE_URL), listen on 127.0.0.1, or give --open to run without keys on purpose.`,
  };
}
