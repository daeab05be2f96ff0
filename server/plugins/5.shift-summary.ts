// Shift-end summary e-mail: every OWLSHIFT_SHIFT_SUMMARY_CHECK_S seconds (30 by default) look for
// shifts of the plant's calendar that have ended and send their summary to the subscribed users,
// once per cell and shift (server/utils/reports/report-mail.ts). A wrong setting stops the start-up with a
// message naming the variable (README).
import { databaseReady } from './0.database'

export default defineNitroPlugin((nitroApp) => {
  let checkS: number
  try { checkS = reportMailSettings().checkS }
  catch (err) { console.error((err as Error).message); process.exit(1) }
  const startedAt = Date.now()
  let running = false
  const tick = async () => {
    if (running) return // a slow SMTP server must not stack up checks
    running = true
    try {
      const sent = await reportMailDueShifts(useDb(), Date.now(), { send: sendMail, baseUrl: notifySettings().publicUrl, startedAt })
      for (const s of sent) {
        const what = `[shift-summary] ${s.cellId} ${s.shiftId} ${s.date}: ${s.status}, ${s.recipients - s.failed}/${s.recipients} e-mails sent`
        if (s.status === 'failed') log.warn(`${what}${s.detail ? ` — ${s.detail}` : ''}`)
        else log.info(what)
      }
    }
    catch (err) { log.error(`[shift-summary] check failed: ${(err as Error).message}`) }
    finally { running = false }
  }
  databaseReady.then(tick).catch(err => log.error(`[shift-summary] could not start: ${(err as Error).message}`))
  const timer = setInterval(() => { databaseReady.then(tick).catch(() => {}) }, checkS! * 1000)
  timer.unref()
  nitroApp.hooks.hook('close', () => clearInterval(timer))
})
