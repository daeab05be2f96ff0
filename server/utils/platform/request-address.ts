// A request's address and host under the proxies trusted in OWLSHIFT_TRUSTED_PROXIES (the rules:
// client-address.ts, which config.ts also checks the setting with — so they are apart from this
// file, which reads the configuration).
import type { H3Event } from 'h3'
import { useOwlshiftConfig } from './config'
import { clientAddress, proxyList } from './client-address'

let trusted: ((a: string | undefined) => boolean) | undefined

function isTrustedProxy(address: string | undefined) {
  trusted ??= proxyList(useOwlshiftConfig().trustedProxies)
  return trusted(address)
}

export function requestAddress(event: H3Event): string {
  return clientAddress(event.node.req.socket?.remoteAddress, getRequestHeader(event, 'x-forwarded-for'), isTrustedProxy)
}

/** The host the browser asked for: X-Forwarded-Host only from a trusted proxy. */
export function requestHost(event: H3Event): string | undefined {
  const forwarded = isTrustedProxy(event.node.req.socket?.remoteAddress) ? getRequestHeader(event, 'x-forwarded-host') : undefined
  return forwarded?.split(',')[0]?.trim() || getRequestHeader(event, 'host')
}
