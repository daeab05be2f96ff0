// Decides whether a request is a write sent by a browser from another site (CSRF).
const SAFE_METHODS = new Set(['GET', 'HEAD', 'OPTIONS'])

export function isCrossSiteWrite(method: string, headers: { secFetchSite?: string, origin?: string, host?: string }): boolean {
  if (SAFE_METHODS.has(method)) return false
  if (headers.secFetchSite) return !['same-origin', 'none'].includes(headers.secFetchSite)
  if (headers.origin) {
    try { return new URL(headers.origin).host !== headers.host }
    catch { return true }
  }
  return false // not a browser request: it carries no ambient cookies from another site
}
