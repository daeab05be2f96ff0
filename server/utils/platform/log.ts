// Structured logs (pino: one JSON object per line on stderr). OWLSHIFT_LOG_LEVEL sets the level
// (fatal, error, warn, info, debug, trace; default info). Start-up refusals a person must act on
// are printed plainly instead (server/plugins/0.database.ts).
import pino from 'pino'

export const log = pino({
  level: process.env.OWLSHIFT_LOG_LEVEL ?? 'info',
  base: { app: 'owlshift' },
  timestamp: pino.stdTimeFunctions.isoTime,
}, pino.destination(2))
