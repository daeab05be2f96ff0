// The database schema. One table per concern; times are epoch milliseconds (UTC).
import { sqliteTable, integer, text, index, uniqueIndex } from 'drizzle-orm/sqlite-core'

export const ROLES = ['admin', 'engineer', 'lead', 'operator', 'viewer'] as const

export const users = sqliteTable('users', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  email: text('email').notNull(),
  name: text('name').notNull(),
  role: text('role', { enum: ROLES }).notNull(),
  passwordHash: text('password_hash').notNull(),
  unitSystem: text('unit_system', { enum: ['metric', 'inch'] }).notNull().default('metric'),
  disabled: integer('disabled', { mode: 'boolean' }).notNull().default(false),
  createdAt: integer('created_at').notNull(),
  updatedAt: integer('updated_at').notNull(),
}, t => [uniqueIndex('users_email_unique').on(t.email)])

// Who did what, when, from where. Reused by every later feature that changes state.
export const auditLog = sqliteTable('audit_log', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  at: integer('at').notNull(),
  actorId: integer('actor_id'),
  actorEmail: text('actor_email'),
  origin: text('origin').notNull(), // 'web', 'station:<machine>', 'system', address
  action: text('action').notNull(), // e.g. 'user.create'
  target: text('target'), // e.g. 'user:12'
  detail: text('detail', { mode: 'json' }).$type<Record<string, unknown>>(),
}, t => [index('audit_at').on(t.at), index('audit_action').on(t.action)])

// Failed sign-ins, kept so throttling survives a restart and can be audited.
export const signInFailures = sqliteTable('sign_in_failures', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  at: integer('at').notNull(),
  email: text('email').notNull(),
  address: text('address').notNull(),
}, t => [index('sif_email_at').on(t.email, t.at), index('sif_address_at').on(t.address, t.at)])

// Demo and real shops both need the plant's identity in one row.
export const settingsKv = sqliteTable('settings_kv', {
  key: text('key').primaryKey(),
  value: text('value', { mode: 'json' }).notNull(),
})

export const GRINDING_METHODS = ['through-feed', 'in-feed', 'plunge', 'peel'] as const

export const cells = sqliteTable('cells', {
  id: text('id').primaryKey(), // slug used in MQTT topics
  name: text('name').notNull(),
  timeZone: text('time_zone').notNull().default('UTC'),
})

export const jobs = sqliteTable('jobs', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  partNumber: text('part_number').notNull(),
  description: text('description').notNull(),
  material: text('material').notNull(),
  method: text('method', { enum: GRINDING_METHODS }).notNull(),
  nominalMm: text('nominal_mm').notNull(), // decimal text: exact as the drawing states it
  upperTolNm: integer('upper_tol_nm').notNull(), // nanometres, to keep 0.5 µm exact
  lowerTolNm: integer('lower_tol_nm').notNull(),
  isoFit: text('iso_fit'),
  roundnessLimitNm: integer('roundness_limit_nm'),
  wheelSpec: text('wheel_spec'),
  partsPerPallet: integer('parts_per_pallet').notNull().default(100),
  cycleTimeS: integer('cycle_time_s').notNull().default(20),
  archived: integer('archived', { mode: 'boolean' }).notNull().default(false),
  createdAt: integer('created_at').notNull(),
}, t => [uniqueIndex('jobs_part_number_unique').on(t.partNumber)])

export const machines = sqliteTable('machines', {
  id: text('id').primaryKey(), // slug used in MQTT topics
  cellId: text('cell_id').notNull().references(() => cells.id),
  name: text('name').notNull(),
  model: text('model').notNull(),
  currentJobId: integer('current_job_id').references(() => jobs.id),
  sortOrder: integer('sort_order').notNull().default(0),
  createdAt: integer('created_at').notNull(),
})
