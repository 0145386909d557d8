/**
 * Where a webhook may be delivered. A subscription names a URL; the worker POSTs alert changes
 * to it and keeps the answer's status and timing in a log an admin can read. Left unchecked,
 * that makes the service a probe of the networks it sits in, so an address is refused when it
 * is not public unicast: loopback, private (RFC 1918), shared (RFC 6598), link-local (which
 * holds the cloud metadata address 169.254.169.254), unique-local, multicast, unspecified,
 * reserved and documentation ranges (the special-purpose ranges of the IANA registries, RFC
 * 6890), in IPv4, IPv6 and IPv4-mapped IPv6 form. A list of hosts and CIDRs can allow some of
 * them (a deployment's own receivers, the tests' loopback receivers).
 *
 * The check takes the name lookup as an argument, so the caller decides where names are
 * resolved and this file stays free of I/O; `checkTarget` returns the address it checked so the
 * caller connects to exactly that one (no second lookup that a rebinding name could answer
 * differently).
 */
import { BlockList, isIP } from 'node:net';

interface Range {
  net: string;
  prefix: number;
  family: 'ipv4' | 'ipv6';
  what: string;
}

const REFUSED: Range[] = [
  { net: '0.0.0.0', prefix: 8, family: 'ipv4', what: 'unspecified ("this network")' },
  { net: '10.0.0.0', prefix: 8, family: 'ipv4', what: 'private (RFC 1918)' },
  { net: '100.64.0.0', prefix: 10, family: 'ipv4', what: 'shared address space (RFC 6598)' },
  { net: '127.0.0.0', prefix: 8, family: 'ipv4', what: 'loopback' },
  { net: '169.254.0.0', prefix: 16, family: 'ipv4', what: 'link-local (holds cloud metadata services)' },
  { net: '172.16.0.0', prefix: 12, family: 'ipv4', what: 'private (RFC 1918)' },
  { net: '192.0.0.0', prefix: 24, family: 'ipv4', what: 'protocol assignments (RFC 6890)' },
  { net: '192.0.2.0', prefix: 24, family: 'ipv4', what: 'documentation (RFC 5737)' },
  { net: '192.168.0.0', prefix: 16, family: 'ipv4', what: 'private (RFC 1918)' },
  { net: '198.18.0.0', prefix: 15, family: 'ipv4', what: 'benchmarking (RFC 2544)' },
  { net: '198.51.100.0', prefix: 24, family: 'ipv4', what: 'documentation (RFC 5737)' },
  { net: '203.0.113.0', prefix: 24, family: 'ipv4', what: 'documentation (RFC 5737)' },
  { net: '224.0.0.0', prefix: 4, family: 'ipv4', what: 'multicast' },
  { net: '240.0.0.0', prefix: 4, family: 'ipv4', what: 'reserved or broadcast' },
  { net: '::', prefix: 128, family: 'ipv6', what: 'unspecified' },
  { net: '::1', prefix: 128, family: 'ipv6', what: 'loopback' },
  { net: '64:ff9b:1::', prefix: 48, family: 'ipv6', what: 'local-use translation (RFC 8215)' },
  { net: '100::', prefix: 64, family: 'ipv6', what: 'discard-only (RFC 6666)' },
  { net: '2001:db8::', prefix: 32, family: 'ipv6', what: 'documentation (RFC 3849)' },
  { net: 'fc00::', prefix: 7, family: 'ipv6', what: 'unique-local' },
  { net: 'fe80::', prefix: 10, family: 'ipv6', what: 'link-local' },
  { net: 'fec0::', prefix: 10, family: 'ipv6', what: 'site-local (deprecated)' },
  { net: 'ff00::', prefix: 8, family: 'ipv6', what: 'multicast' },
];

// One list per kind of range, so a refusal can say which kind it was. BlockList checks
// IPv4-mapped IPv6 addresses (::ffff:10.0.0.1) against the IPv4 ranges as well.
const refusedLists = REFUSED.map((r) => {
  const list = new BlockList();
  list.addSubnet(r.net, r.prefix, r.family);
  return { list, what: r.what };
});

const familyOf = (address: string): 'ipv4' | 'ipv6' => (isIP(address) === 6 ? 'ipv6' : 'ipv4');

/** Why this address may not receive webhooks (the kind of range), or null when it may. */
export function refusedRange(address: string): string | null {
  const family = familyOf(address);
  for (const r of refusedLists) if (r.list.check(address, family)) return r.what;
  return null;
}

/** Hosts and CIDRs allowed although they are not public; see parseAllowList. */
export interface AllowList {
  hosts: ReadonlySet<string>;
  nets: BlockList;
}

/** Reads a list such as "127.0.0.1/32, receiver.lan, ::1": CIDRs and addresses go to nets, names to hosts. Throws naming a bad entry. */
export function parseAllowList(entries: string[]): AllowList {
  const hosts = new Set<string>();
  const nets = new BlockList();
  for (const raw of entries) {
    const e = raw.trim();
    if (!e) continue;
    const [addr, bits, extra] = e.split('/');
    const fam = isIP(addr);
    if (fam !== 0) {
      const max = fam === 4 ? 32 : 128;
      const prefix = bits === undefined ? max : Number(bits);
      if (extra !== undefined || !Number.isInteger(prefix) || prefix < 0 || prefix > max) throw new Error(`"${e}" is not an address or a CIDR`);
      nets.addSubnet(addr, prefix, fam === 4 ? 'ipv4' : 'ipv6');
    } else if (bits === undefined && /^[a-z0-9]([a-z0-9-]*[a-z0-9])?(\.[a-z0-9]([a-z0-9-]*[a-z0-9])?)*$/i.test(e)) {
      hosts.add(e.toLowerCase());
    } else {
      throw new Error(`"${e}" is neither a host name, an address nor a CIDR`);
    }
  }
  return { hosts, nets };
}

/** A name lookup: every address of a host name, as node:dns's lookup with { all: true } gives them. */
export type LookupAll = (hostname: string) => Promise<Array<{ address: string; family: number }>>;

export type TargetCheck =
  | { ok: true; address: string; family: 4 | 6 }
  /** `unresolved`: the name has no address now (nothing was refused; delivery checks again). */
  | { ok: false; reason: string; unresolved?: boolean };

/**
 * Resolves the URL's host (unless it is an address) and checks every address it has: one
 * refused address refuses the target, so a name cannot mix a public address with an inner
 * one. Returns the first address to connect to.
 */
export async function checkTarget(url: URL, lookup: LookupAll, allow: AllowList): Promise<TargetCheck> {
  const host = url.hostname.replace(/^\[(.*)\]$/, '$1').toLowerCase();
  const hostAllowed = allow.hosts.has(host);
  let addresses: Array<{ address: string; family: number }>;
  if (isIP(host)) {
    addresses = [{ address: host, family: isIP(host) }];
  } else {
    try {
      addresses = await lookup(host);
    } catch {
      addresses = [];
    }
    if (addresses.length === 0) return { ok: false, reason: `${host} has no address`, unresolved: true };
  }
  for (const a of addresses) {
    if (hostAllowed || allow.nets.check(a.address, familyOf(a.address))) continue;
    const what = refusedRange(a.address);
    if (what !== null) {
      const named = a.address === host ? a.address : `${host} (${a.address})`;
      return { ok: false, reason: `${named} is ${what}, not a public address; webhooks go to public addresses unless CANSIGHT_WEBHOOK_ALLOW_HOSTS allows it` };
    }
  }
  return { ok: true, address: addresses[0].address, family: addresses[0].family === 6 ? 6 : 4 };
}
