// Security headers on every response, and a refusal of cookie-carrying writes that come from
// another site. Built on h3's own utilities (no module): the checks are a few lines and we keep
// full control over the stream and upload routes later issues add.
import { isCrossSiteWrite } from '../utils/platform/cross-site'

export default defineEventHandler((event) => {
  setResponseHeaders(event, {
    'X-Content-Type-Options': 'nosniff',
    'X-Frame-Options': 'DENY',
    'Referrer-Policy': 'same-origin',
    'Permissions-Policy': 'camera=(self), microphone=(), geolocation=()',
    'Cross-Origin-Opener-Policy': 'same-origin',
    'Content-Security-Policy': [
      "default-src 'self'",
      "script-src 'self' 'unsafe-inline'", // Nuxt inlines its runtime config
      "style-src 'self' 'unsafe-inline'",
      "img-src 'self' data: blob:",
      "font-src 'self'",
      "connect-src 'self'",
      "worker-src 'self'",
      "object-src 'none'",
      "base-uri 'self'",
      "frame-ancestors 'none'",
      "form-action 'self'",
    ].join('; '),
  })
  if (isCrossSiteWrite(event.method, {
    secFetchSite: getRequestHeader(event, 'sec-fetch-site'),
    origin: getRequestHeader(event, 'origin'),
    host: requestHost(event),
  })) {
    throw createError({ statusCode: 403, message: 'Refused: this change was sent from another site. Open Owlshift itself and try again.' })
  }
})
