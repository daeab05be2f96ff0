// Who sent a request: the address of the connection, unless that connection comes from a reverse
// proxy named in OWLSHIFT_TRUSTED_PROXIES — only then are X-Forwarded-For and X-Forwarded-Host
// believed. Anyone can send those headers, so trusting them from everyone let a throttled address
// sign in again under a made-up one and write that into the audit log. The rules, pure; a
// request's address and host under the configured proxies: request-address.ts.
import { BlockList, isIP } from 'node:net'

/** "10.0.0.0/8", "127.0.0.1", "::1", "fd00::/8" → what BlockList needs; null when not an address. */
export function parseProxyEntry(entry: string): { address: string, prefix?: number, family: 'ipv4' | 'ipv6' } | null {
  const [address, prefixText, extra] = entry.split('/')
  const v = isIP(address ?? '')
  if (!v || extra !== undefined) return null
  const family = v === 4 ? 'ipv4' : 'ipv6'
  if (prefixText === undefined) return { address: address!, family }
  const prefix = Number(prefixText)
  if (!Number.isInteger(prefix) || prefix < 0 || prefix > (v === 4 ? 32 : 128)) return null
  return { address: address!, prefix, family }
}

/** An IPv4 client on a dual-stack socket shows as ::ffff:a.b.c.d. */
const plain = (address: string) => (/^::ffff:\d+\.\d+\.\d+\.\d+$/i.test(address) ? address.slice(7) : address)

export function proxyList(entries: readonly string[]) {
  const list = new BlockList()
  for (const e of entries) {
    const p = parseProxyEntry(e)
    if (!p) continue
    if (p.prefix === undefined) list.addAddress(p.address, p.family)
    else list.addSubnet(p.address, p.prefix, p.family)
  }
  return (address: string | undefined) => {
    if (!address) return false
    const a = plain(address)
    const v = isIP(a)
    return v !== 0 && list.check(a, v === 4 ? 'ipv4' : 'ipv6')
  }
}

/**
 * The client's address: the connection's peer, or — when the peer is a trusted proxy — the right-most
 * address in X-Forwarded-For that is not itself a trusted proxy (entries further left are what the
 * client claimed, so they are never believed).
 */
export function clientAddress(peer: string | undefined, forwardedFor: string | undefined, isTrusted: (a: string | undefined) => boolean): string {
  const own = peer ? plain(peer) : 'unknown'
  if (!forwardedFor || !isTrusted(peer)) return own
  const chain = forwardedFor.split(',').map(s => plain(s.trim())).filter(Boolean)
  for (let i = chain.length - 1; i >= 0; i--) {
    if (!isTrusted(chain[i])) return isIP(chain[i]!) ? chain[i]! : own
  }
  return chain[0] ?? own
}
