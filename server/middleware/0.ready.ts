// Hold requests until the database is open and migrated.
import { databaseReady } from '../plugins/0.database'

export default defineEventHandler(async () => { await databaseReady })
