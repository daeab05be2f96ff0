// Where alerts point people and who the push services may contact: OWLSHIFT_PUBLIC_URL (the
// address in every link) and OWLSHIFT_PUSH_CONTACT (RFC 8292), read and checked at start. Kept
// apart from notify.ts so the phone steps (phone-alerts.ts), which notify.ts calls, read it
// without importing notify.ts back.
import { z } from 'zod'

const envSchema = z.object({
  OWLSHIFT_PUBLIC_URL: z.string().url('must be the address people open, e.g. https://owlshift.plant.example').default('http://localhost:3000'),
  OWLSHIFT_PUSH_CONTACT: z.string().regex(/^(mailto:|https:)/, 'must start with mailto: or https: (RFC 8292)').default('mailto:owlshift@localhost'),
})
export function notifySettings(env: Record<string, string | undefined> = process.env) {
  const parsed = envSchema.safeParse(Object.fromEntries(Object.entries(env).filter(([k, v]) => k.startsWith('OWLSHIFT_P') && v !== '')))
  if (!parsed.success) throw new Error(`Owlshift notifications: ${parsed.error.issues.map(i => `${i.path.join('.')} ${i.message}`).join('; ')}`)
  return { publicUrl: parsed.data.OWLSHIFT_PUBLIC_URL, pushContact: parsed.data.OWLSHIFT_PUSH_CONTACT }
}
