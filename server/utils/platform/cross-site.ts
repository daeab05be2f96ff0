// Decides whether a request is a write sent by a browser from another site (CSRF). Both signals
// count on their own: a Sec-Fetch-Site other than same-origin/none, or an Origin naming another
// host, refuses the write (as the README says) — one cannot vouch for the other.
const SAFE_METHODS = new Set(['GET', 'HEAD', 'OPTIONS'])

export function isCrossSiteWrite(method: string, headers: { secFetchSite?: string, origin?: string, host?: string }): boolean {
  if (SAFE_METHODS.has(method)) return false
  if (headers.secFetchSite && !['same-origin', 'none'].includes(headers.secFetchSite)) return true
  if (headers.origin) {
    try { return new URL(headers.origin).host !== headers.host }
    catch { return true } // "null" and other opaque origins
  }
  return false // not a browser request: it carries no ambient cookies from another site
}
