import { describe, it, expect } from 'vitest'
import { parseConfig, ConfigError } from '../../server/utils/platform/config'
import { isCrossSiteWrite } from '../../server/utils/platform/cross-site'

describe('configuration', () => {
  it('defaults to a SQLite file under data/', () => {
    const c = parseConfig({})
    expect(c.databaseUrl).toMatch(/^file:.*data\/owlshift\.db$/)
    expect(c.signIn.maxPerAccount).toBe(5)
  })
  it('refuses a DATABASE_URL that is not libSQL, with an actionable message', () => {
    expect(() => parseConfig({ DATABASE_URL: 'postgres://x/y' })).toThrow(ConfigError)
    expect(() => parseConfig({ DATABASE_URL: 'postgres://x/y' })).toThrow(/file:\/path/)
  })
  it('refuses a bad number and names the variable', () => {
    expect(() => parseConfig({ OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT: 'many' })).toThrow(/OWLSHIFT_SIGNIN_MAX_PER_ACCOUNT/)
  })
})

describe('cross-site write check', () => {
  it('allows same-origin and non-browser writes, refuses cross-site ones', () => {
    expect(isCrossSiteWrite('GET', { secFetchSite: 'cross-site' })).toBe(false)
    expect(isCrossSiteWrite('POST', { secFetchSite: 'same-origin' })).toBe(false)
    expect(isCrossSiteWrite('POST', { secFetchSite: 'cross-site' })).toBe(true)
    expect(isCrossSiteWrite('POST', { secFetchSite: 'same-site' })).toBe(true)
    expect(isCrossSiteWrite('PATCH', { origin: 'http://evil.example', host: 'owl.local:3000' })).toBe(true)
    expect(isCrossSiteWrite('PATCH', { origin: 'http://owl.local:3000', host: 'owl.local:3000' })).toBe(false)
    expect(isCrossSiteWrite('POST', {})).toBe(false)
    // Either signal alone refuses: a foreign Origin whatever Sec-Fetch-Site says (README, Security).
    expect(isCrossSiteWrite('POST', { secFetchSite: 'same-origin', origin: 'http://evil.example', host: 'owl.local:3000' })).toBe(true)
    expect(isCrossSiteWrite('POST', { secFetchSite: 'none', origin: 'null', host: 'owl.local:3000' })).toBe(true)
    expect(isCrossSiteWrite('POST', { secFetchSite: 'same-origin', origin: 'http://owl.local:3000', host: 'owl.local:3000' })).toBe(false)
  })
})

import { throttleVerdict } from '../../server/utils/accounts/sign-in'
describe('sign-in throttling rule', () => {
  const window = 15 * 60_000
  it('blocks at the limit and says how long to wait', () => {
    expect(throttleVerdict(4, 1000, 5, window, 2000).blocked).toBe(false)
    const v = throttleVerdict(5, 1000, 5, window, 1000 + 60_000)
    expect(v.blocked).toBe(true)
    expect(v.retryAfterS).toBe(14 * 60)
  })
})
