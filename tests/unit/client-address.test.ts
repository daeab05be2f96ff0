// Which address a request came from: forwarded headers believed only from configured proxies.
// Address and prefix syntax: RFC 4632 (IPv4 CIDR) and RFC 4291 §2.3 (IPv6 prefixes), checked with
// Node's own net.BlockList.
import { describe, it, expect } from 'vitest'
import { clientAddress, parseProxyEntry, proxyList } from '../../server/utils/platform/client-address'
import { parseConfig, ConfigError } from '../../server/utils/platform/config'

describe('client address', () => {
  const none = proxyList([])
  const local = proxyList(['127.0.0.1', '10.0.0.0/8', 'fd00::/8'])

  it('ignores X-Forwarded-For unless the connection comes from a trusted proxy', () => {
    expect(clientAddress('203.0.113.5', '198.51.100.1', none)).toBe('203.0.113.5')
    expect(clientAddress('127.0.0.1', '198.51.100.1', none)).toBe('127.0.0.1')
    expect(clientAddress('203.0.113.5', '198.51.100.1', local)).toBe('203.0.113.5') // not a proxy of ours
    expect(clientAddress('::ffff:127.0.0.1', undefined, local)).toBe('127.0.0.1')
  })

  it('from a trusted proxy takes the right-most address that is not a proxy itself', () => {
    expect(clientAddress('127.0.0.1', '198.51.100.1', local)).toBe('198.51.100.1')
    // The client put 192.0.2.66 in front; the proxy appended what it saw.
    expect(clientAddress('127.0.0.1', '192.0.2.66, 198.51.100.1', local)).toBe('198.51.100.1')
    // Two proxies of ours in a row.
    expect(clientAddress('::ffff:127.0.0.1', '198.51.100.1, 10.1.2.3', local)).toBe('198.51.100.1')
    expect(clientAddress('fd00::1', '2001:db8::7', local)).toBe('2001:db8::7')
    // Garbage in the header: the proxy's own address, never a made-up name.
    expect(clientAddress('127.0.0.1', 'not-an-address', local)).toBe('127.0.0.1')
  })

  it('accepts addresses and prefixes, and start-up refuses anything else by name', () => {
    expect(parseProxyEntry('10.0.0.0/8')).toEqual({ address: '10.0.0.0', prefix: 8, family: 'ipv4' })
    expect(parseProxyEntry('::1')).toEqual({ address: '::1', family: 'ipv6' })
    for (const bad of ['localhost', '10.0.0.0/33', '1.2.3.4/8/9', '']) expect(parseProxyEntry(bad)).toBeNull()
    expect(parseConfig({ OWLSHIFT_TRUSTED_PROXIES: ' 127.0.0.1 , 10.0.0.0/8 ' }).trustedProxies).toEqual(['127.0.0.1', '10.0.0.0/8'])
    expect(parseConfig({}).trustedProxies).toEqual([])
    expect(() => parseConfig({ OWLSHIFT_TRUSTED_PROXIES: '127.0.0.1,proxy.local' })).toThrow(ConfigError)
    expect(() => parseConfig({ OWLSHIFT_TRUSTED_PROXIES: '127.0.0.1,proxy.local' })).toThrow(/OWLSHIFT_TRUSTED_PROXIES: not an IP address.*proxy\.local/)
  })
})
