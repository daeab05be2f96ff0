// Takes a backup now (admin). Scheduled backups run from server/plugins/4.maintenance.ts.
export default defineEventHandler(async (event) => {
  const admin = await requireRole(event, 'admin')
  const file = await backupDatabase(useOwlshiftConfig().maintenance.backupKeep)
  await audit(event, admin, 'backup.create', `backup:${file.name}`, { bytes: file.bytes })
  setResponseStatus(event, 201)
  return file
})
