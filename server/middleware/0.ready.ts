// Hold requests until the database is open and migrated.
import { databaseReady } from '../plugins/database'

export default defineEventHandler(async () => { await databaseReady })
