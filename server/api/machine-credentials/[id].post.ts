// Issues new broker credentials for a machine (admin). The password is shown once; only its
// hash is kept. The machine's adapter must be given the new password.
import { z } from 'zod'

const params = z.object({ id: z.string().regex(/^[a-z0-9][a-z0-9_-]{0,39}$/, 'not a machine id') })

export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const { id } = readValidParams(event, params)
  if (!machineContext(id)) throw createError({ statusCode: 404, message: `There is no machine "${id}".` })
  const password = await setMachinePassword(id)
  await audit(event, admin, 'machine.credentials-rotated', `machine:${id}`)
  return { machineId: id, username: id, password, note: 'Shown once. Enter it in the machine adapter; the old password no longer works for new connections.' }
})
