// A machine's setting for coming back after Owlshift was away (admins and process engineers):
// whether Owlshift resumes it when it held only for its parts allowance, or a person does
// (docs/mqtt.md#coming-back). Some machine builders' instructions forbid an unattended restart.
import { z } from 'zod'
import { eq } from 'drizzle-orm'

const body = z.object({
  resumeAfterOutage: z.enum(['owlshift', 'person'], 'Choose "Owlshift resumes it" or "A person resumes it".'),
})

export default defineEventHandler(async (event) => {
  const user = await requireRole(event, 'admin', 'engineer')
  const ctx = machineFromParams(event)
  const { resumeAfterOutage } = await readValidBody(event, body)
  const before = ctx.personResumes ? 'person' : 'owlshift'
  await useDb().update(schema.machines).set({ resumeAfterOutage }).where(eq(schema.machines.id, ctx.id))
  await refreshMachineContext(ctx.id)
  if (before !== resumeAfterOutage) await audit(event, user, 'machine.resume-setting', `machine:${ctx.id}`, { from: before, to: resumeAfterOutage })
  return { id: ctx.id, resumeAfterOutage }
})
