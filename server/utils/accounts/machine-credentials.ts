// Broker credentials of machines: the user name is the machine id, the password is random and
// shown once; only its scrypt hash is stored.
import { randomBytes } from 'node:crypto'
import { eq } from 'drizzle-orm'

const verified = new Map<string, string>() // machineId → "hash|password" last verified (saves scrypt on reconnect storms)

export function newMachinePassword(): string {
  return randomBytes(18).toString('base64url')
}

export async function setMachinePassword(machineId: string, password = newMachinePassword()): Promise<string> {
  await useDb().update(schema.machines).set({ mqttPasswordHash: await hashPassword(password), mqttRotatedAt: Date.now() }).where(eq(schema.machines.id, machineId))
  verified.delete(machineId)
  return password
}

export async function verifyMachinePassword(machineId: string, password: string): Promise<boolean> {
  const [row] = await useDb().select({ hash: schema.machines.mqttPasswordHash }).from(schema.machines).where(eq(schema.machines.id, machineId))
  if (!row?.hash) return false
  if (verified.get(machineId) === `${row.hash}|${password}`) return true
  const ok = await verifyPassword(row.hash, password)
  if (ok) verified.set(machineId, `${row.hash}|${password}`)
  return ok
}
