// Error answers carry the status text of their code ("Unauthorized", "Too Many Requests", …):
// h3's createError leaves it empty unless given, and Nitro's error handler then sends "Server Error"
// with every 4xx. The 'error' hook runs just before that handler (node:http's STATUS_CODES, RFC 9110 §15).
import { STATUS_CODES } from 'node:http'

export default defineNitroPlugin((nitroApp) => {
  nitroApp.hooks.hook('error', (error) => {
    const e = error as { statusCode?: number, statusMessage?: string }
    if (e.statusCode && !e.statusMessage) e.statusMessage = STATUS_CODES[e.statusCode]
  })
})
