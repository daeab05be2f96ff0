// The database schema. One table per concern; times are epoch milliseconds (UTC).
// Over 400 lines on purpose: drizzle-kit reads the schema from this one file (drizzle.config.ts)
// to generate the migrations, and the tables' foreign keys point at one another across concerns.
import { sqliteTable, integer, text, real, index, uniqueIndex, primaryKey } from 'drizzle-orm/sqlite-core'
import { sql } from 'drizzle-orm'
import type { MachinePrediction } from '../../shared/utils/machine-loop'
import type { AllowanceState } from '../../shared/utils/allowance'

export const ROLES = ['admin', 'engineer', 'lead', 'operator', 'viewer'] as const

export const users = sqliteTable('users', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  email: text('email').notNull(),
  name: text('name').notNull(),
  role: text('role', { enum: ROLES }).notNull(),
  passwordHash: text('password_hash').notNull(),
  unitSystem: text('unit_system', { enum: ['metric', 'inch'] }).notNull().default('metric'),
  /** for SMS and voice alerts, E.164 (+491701234567); null: none */
  phone: text('phone'),
  disabled: integer('disabled', { mode: 'boolean' }).notNull().default(false),
  createdAt: integer('created_at').notNull(),
  updatedAt: integer('updated_at').notNull(),
  /** sessions sealed under an older generation are refused: bumped by "sign out everywhere", a password reset, a role change and disabling */
  sessionGeneration: integer('session_generation').notNull().default(0),
}, t => [uniqueIndex('users_email_unique').on(t.email)])

/** Sessions signed out before their cookie expires: a saved copy of the cookie no longer works (server/utils/accounts/access.ts). */
export const endedSessions = sqliteTable('ended_sessions', {
  sid: text('sid').primaryKey(),
  userId: integer('user_id').notNull(),
  endedAt: integer('ended_at').notNull(),
  /** when the cookie would have expired anyway; the row is pruned after that */
  expiresAt: integer('expires_at').notNull(),
}, t => [index('ended_sessions_expires').on(t.expiresAt)])

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
  lengthMm: text('length_mm'), // optional part length, decimal text
  lengthUpperTolNm: integer('length_upper_tol_nm'),
  lengthLowerTolNm: integer('length_lower_tol_nm'),
}, t => [uniqueIndex('jobs_part_number_unique').on(t.partNumber)])

export const machines = sqliteTable('machines', {
  id: text('id').primaryKey(), // slug used in MQTT topics
  cellId: text('cell_id').notNull().references(() => cells.id),
  name: text('name').notNull(),
  model: text('model').notNull(),
  currentJobId: integer('current_job_id').references(() => jobs.id),
  sortOrder: integer('sort_order').notNull().default(0),
  // Broker credentials: the user name is the machine id; only a scrypt hash of the password is kept.
  mqttPasswordHash: text('mqtt_password_hash'),
  mqttRotatedAt: integer('mqtt_rotated_at'),
  /** after it held for its parts allowance: 'owlshift' resumes it when safe, or a 'person' does (docs/mqtt.md#coming-back) */
  resumeAfterOutage: text('resume_after_outage', { enum: ['owlshift', 'person'] }).notNull().default('owlshift'),
  createdAt: integer('created_at').notNull(),
})

// ── Ingest: what machines tell us, stored once ─────────────────────────────────────────────

/** Current state of each machine, updated in the same commit as the messages that change it. */
export const machineStatus = sqliteTable('machine_status', {
  machineId: text('machine_id').primaryKey().references(() => machines.id),
  online: integer('online', { mode: 'boolean' }).notNull().default(false),
  session: integer('session'),
  execution: text('execution'),
  activeFaults: text('active_faults', { mode: 'json' }).$type<string[]>().notNull().default([]),
  lastSeq: integer('last_seq').notNull().default(0),
  lastMessageAt: integer('last_message_at'),
  lastReadingAt: integer('last_reading_at'),
  lastCycleAt: integer('last_cycle_at'),
  lastDiameterUm: real('last_diameter_um'),
  partsGood: integer('parts_good').notNull().default(0),
  partsScrap: integer('parts_scrap').notNull().default(0),
  blanksLeft: integer('blanks_left'),
  cycleTimeS: real('cycle_time_s'),
  /** offset the machine reports in force (axis µm) */
  appliedOffsetUm: real('applied_offset_um'),
  /** offset last requested by a command (axis µm) */
  requestedOffsetUm: real('requested_offset_um'),
  jobPartNumber: text('job_part_number'),
  /** the compensation engine's state (shared/utils/compensation.ts), JSON */
  engineState: text('engine_state', { mode: 'json' }),
  /** the engine's latest prediction, for the overview */
  prediction: text('prediction', { mode: 'json' }).$type<MachinePrediction | null>(),
  /** the parts allowance: part serials it counts from and the last grant sent (shared/utils/allowance.ts) */
  allowance: text('allowance', { mode: 'json' }).$type<AllowanceState | null>(),
  /** in FEED_HOLD: what holds it, as the machine said (hold command, allowance) */
  holdCauses: text('hold_causes', { mode: 'json' }).$type<string[] | null>(),
  updatedAt: integer('updated_at').notNull(),
})

export const readings = sqliteTable('readings', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  seq: integer('seq').notNull(),
  part: integer('part').notNull(),
  time: integer('time').notNull(), // machine clock, ms
  receivedAt: integer('received_at').notNull(),
  status: text('status').notNull(),
  diameterUm: real('diameter_um'),
  roundnessUm: real('roundness_um'),
  lengthUm: real('length_um'),
  offsetUm: real('offset_um').notNull(),
  jobPartNumber: text('job_part_number'),
  /**
   * What the compensation engine made of this part, kept here instead of a decision row for every
   * part (only decisions that acted are rows): the size it expected for the part (its level
   * estimate plus gain × the offset the part was ground with), nm; and its wear slope estimate
   * after the part, pm per part (µm × 10⁶). Null where the engine had none (learning, no engine).
   */
  expectedNm: integer('expected_nm'),
  slopePm: integer('slope_pm'),
}, t => [uniqueIndex('readings_machine_seq').on(t.machineId, t.seq), index('readings_machine_time').on(t.machineId, t.time)])

/** Every other numbered machine message (birth, state, event, ack), stored once; the per-part ones are cycle_events. */
export const machineMessages = sqliteTable('machine_messages', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  seq: integer('seq').notNull(),
  kind: text('kind').notNull(), // birth | state | event | ack
  type: text('type'), // event type, ack command, execution state
  time: integer('time').notNull(),
  receivedAt: integer('received_at').notNull(),
  payload: text('payload', { mode: 'json' }).notNull(),
}, t => [
  uniqueIndex('messages_machine_seq').on(t.machineId, t.seq), index('messages_machine_time').on(t.machineId, t.time),
  // the report reads one kind of message at a time (part_unloaded, faults, dresses, offset acks, states)
  index('messages_machine_type_time').on(t.machineId, t.type, t.time),
  // partial index: the report reads applied offsets (those with a reason of their own; the others are cycle_events)
  index('messages_offset_applied').on(t.machineId, t.time).where(sql`${t.type} = 'offset:applied'`),
])

/**
 * The messages a machine sends for every part (part loaded, ground, gauged, unloaded) and its
 * "offset applied" answers, one row of numbers each (shared/utils/cycle-events.ts gives the message
 * back from it). Keyed by machine time first: the report reads a time window of every machine,
 * and rows arrive nearly in that order (docs/storage.md#cycle-events). A table without rowid
 * (migration 0021): the key is the table.
 */
export const cycleEvents = sqliteTable('cycle_events', {
  /** the machine's clock, ms */
  time: integer('time').notNull(),
  machineId: text('machine_id').notNull(),
  seq: integer('seq').notNull(),
  /** CYCLE_CODES */
  code: integer('code').notNull(),
  part: integer('part'),
  n: integer('n'),
  a: real('a'),
  b: real('b'),
  text: text('text'),
}, t => [primaryKey({ columns: [t.time, t.machineId, t.seq] })])

/** Presence changes (birth and death); death is the MQTT will and carries no seq. */
export const presenceLog = sqliteTable('presence_log', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  /** server's receive time */
  at: integer('at').notNull(),
  online: integer('online', { mode: 'boolean' }).notNull(),
  session: integer('session'),
  reason: text('reason'),
  /**
   * the machine's clock at the change: a birth's or a clean shutdown's own time; for a will (no time
   * of its own) the server's receive time on the machine's clock (its offset at its latest message);
   * null when neither is known. The report's time model reads this (docs/report-time-model.md).
   */
  machineTime: integer('machine_time'),
}, t => [index('presence_machine_at').on(t.machineId, t.at), index('presence_machine_time').on(t.machineId, t.machineTime)])

/** Numbers that never arrived: recorded, never silently filled. */
export const sequenceGaps = sqliteTable('sequence_gaps', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  fromSeq: integer('from_seq').notNull(),
  toSeq: integer('to_seq').notNull(),
  detectedAt: integer('detected_at').notNull(),
}, t => [index('gaps_machine').on(t.machineId)])

/**
 * A stretch of a machine's messages that came late: from the server's start (cause 'server-start')
 * or the machine's will ('connection-lost') to its next birth, which is live (docs/mqtt.md#coming-back).
 * The engine caught up on them without commanding; the report's outage entry counts them.
 */
export const lateSpans = sqliteTable('late_spans', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  cause: text('cause', { enum: ['server-start', 'connection-lost'] }).notNull(),
  fromSeq: integer('from_seq').notNull(),
  /** the last seq that came late (the birth's seq − 1) */
  toSeq: integer('to_seq').notNull(),
  /** server clock: when the birth ended it */
  endedAt: integer('ended_at').notNull(),
  /** machine clock: the birth's time */
  liveAt: integer('live_at').notNull(),
}, t => [index('late_spans_machine').on(t.machineId, t.endedAt)])

/** Payloads that failed validation, kept with the reason. */
export const deadLetters = sqliteTable('dead_letters', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  receivedAt: integer('received_at').notNull(),
  clientId: text('client_id'),
  machineId: text('machine_id'),
  topic: text('topic').notNull(),
  reason: text('reason').notNull(),
  payload: text('payload').notNull(), // UTF-8 text, or base64 when not text; cut at 16 KiB
  payloadBytes: integer('payload_bytes').notNull(),
  /** the sequence number the payload claims, when it has a usable one: counted as arrived, not missing */
  seq: integer('seq'),
}, t => [index('dead_machine_at').on(t.machineId, t.receivedAt)])

/**
 * The compensation engine's decisions that did something: commanded an offset, held, stopped,
 * asked for a dress, or raised an alert (since migration 0019; before it every decision was a row).
 * A decision that changed nothing leaves its figures on the reading (expected size, slope) and can
 * be recomputed exactly by replaying from the engine snapshot before it (engine_snapshots).
 */
export const decisions = sqliteTable('decisions', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  seq: integer('seq').notNull(), // the reading or event it answered
  at: integer('at').notNull(),
  action: text('action').notNull(), // offset | hold | stop | dress | none
  correctionUm: real('correction_um'),
  offsetUm: real('offset_um').notNull(),
  commandId: text('command_id'),
  reason: text('reason').notNull(),
  /** the figures the decision used; null since migration 0019 (the reason states the main ones; a replay from the snapshot before it gives them all) */
  inputs: text('inputs', { mode: 'json' }),
  alerts: text('alerts', { mode: 'json' }),
  /** the engine's wear slope (µm per part) from `inputs`, as a column so the report reads it without parsing JSON; null before migration 0011 */
  slopeUmPerPart: real('slope_um_per_part'),
}, t => [index('decisions_machine_at').on(t.machineId, t.at)])

/**
 * The compensation engine's whole state every ENGINE_SNAPSHOT_EVERY_PARTS readings of a machine
 * (shared/utils/machine-loop.ts), after the reading `seq`: a replay started from one decides part
 * for part what ingest decided after it, so decisions that changed nothing need not be stored.
 */
export const engineSnapshots = sqliteTable('engine_snapshots', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  seq: integer('seq').notNull(),
  /** server's clock */
  at: integer('at').notNull(),
  /** the machine's clock of the reading */
  time: integer('time').notNull(),
  state: text('state', { mode: 'json' }).notNull(),
}, t => [index('engine_snapshots_machine_seq').on(t.machineId, t.seq)])

/** Commands sent to machines and what became of them. */
export const commands = sqliteTable('commands', {
  id: text('id').primaryKey(),
  machineId: text('machine_id').notNull(),
  type: text('type').notNull(), // offset | dress | hold | resume
  origin: text('origin').notNull(), // engine | user:<id>
  /** the message sent, in compact form since migration 0024 (commandStored / commandFromRow, shared/utils/command-rows.ts) */
  payload: text('payload', { mode: 'json' }).notNull(),
  issuedAt: integer('issued_at').notNull(),
  expiresAt: integer('expires_at').notNull(),
  status: text('status').notNull(), // sent | applied | rejected | expired
  requestedOffsetUm: real('requested_offset_um'),
  appliedOffsetUm: real('applied_offset_um'),
  ackAt: integer('ack_at'),
  ackReason: text('ack_reason'),
}, t => [index('commands_machine_issued').on(t.machineId, t.issuedAt)])

// ── Alarms (states and verbs from ISA-18.2 / IEC 62682) ───────────────────────────────────

export const alarms = sqliteTable('alarms', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id'),
  /** what raised it, e.g. fault:fire_alarm, engine:trend-near-limit, link:silent */
  condition: text('condition').notNull(),
  priority: integer('priority').notNull(), // 1 top … 4 low
  state: text('state').notNull(),
  active: integer('active', { mode: 'boolean' }).notNull(),
  latching: integer('latching', { mode: 'boolean' }).notNull().default(false),
  message: text('message').notNull(),
  raisedAt: integer('raised_at').notNull(),
  lastChangeAt: integer('last_change_at').notNull(),
  activations: integer('activations').notNull().default(1),
  record: text('record', { mode: 'json' }).notNull(), // the alarm model's full record
  closedAt: integer('closed_at'),
  /** a cell alarm (fire, mist: machineId null) names its cell; a machine alarm its machine's cell */
  cellId: text('cell_id'),
  /** a cell alarm: the machines that reported it or stopped under it */
  machines: text('machines', { mode: 'json' }).$type<string[]>(),
  /** the standing alarm whose cause this one is a consequence of (suppressed under it while active) */
  causeAlarmId: integer('cause_alarm_id'),
}, t => [index('alarms_open').on(t.closedAt, t.priority), index('alarms_machine_condition').on(t.machineId, t.condition)])

export const alarmTransitions = sqliteTable('alarm_transitions', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  alarmId: integer('alarm_id').notNull().references(() => alarms.id),
  at: integer('at').notNull(),
  fromState: text('from_state').notNull(),
  toState: text('to_state').notNull(),
  action: text('action').notNull(),
  userId: integer('user_id'),
  where: text('where').notNull(), // system | web <address> | station:<machine>
  note: text('note'),
  /** the machine's clock when a machine message caused the transition (`at` is the server's); null otherwise */
  machineAt: integer('machine_at'),
}, t => [index('alarm_transitions_alarm').on(t.alarmId), index('alarm_transitions_at').on(t.at), index('alarm_transitions_machine_at').on(t.machineAt)])

// ── Notifications: push devices, VAPID keys, escalation state, delivery log ────────────────

/** The server's VAPID key pair (RFC 8292), made once at first start. One row, id 1. */
export const vapidKeys = sqliteTable('vapid_keys', {
  id: integer('id').primaryKey(),
  publicKey: text('public_key').notNull(),
  privateKey: text('private_key').notNull(),
  createdAt: integer('created_at').notNull(),
})

/** A browser subscribed to Web Push for one user (one row per device). */
export const pushSubscriptions = sqliteTable('push_subscriptions', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  userId: integer('user_id').notNull().references(() => users.id),
  endpoint: text('endpoint').notNull(),
  p256dh: text('p256dh').notNull(),
  auth: text('auth').notNull(),
  label: text('label').notNull(),
  createdAt: integer('created_at').notNull(),
  lastSentAt: integer('last_sent_at'),
  lastError: text('last_error'),
}, t => [uniqueIndex('push_subscriptions_endpoint').on(t.endpoint), index('push_subscriptions_user').on(t.userId)])

/** The router's memory of each alarm it is waking people for (shared/utils/alert-routing.ts AlertTrack). */
export const alertTracks = sqliteTable('alert_tracks', {
  alarmId: integer('alarm_id').primaryKey().references(() => alarms.id),
  track: text('track', { mode: 'json' }).notNull(),
  updatedAt: integer('updated_at').notNull(),
})

/** Every alert outcome: sent, failed, gone, clicked, acknowledged, held, duplicate, rate-limited… */
export const notificationDeliveries = sqliteTable('notification_deliveries', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  at: integer('at').notNull(),
  alarmId: integer('alarm_id'), // null for a test notification
  userId: integer('user_id'),
  channel: text('channel').notNull(), // push | email | none
  level: integer('level').notNull().default(0), // escalation level
  status: text('status').notNull(),
  subscriptionId: integer('subscription_id'),
  detail: text('detail'),
}, t => [index('notification_deliveries_alarm').on(t.alarmId), index('notification_deliveries_at').on(t.at)])

// ── Jobs: compensation settings with history ──────────────────────────────────────────────

/** Versions of a job's compensation tuning (job-wide, or one machine's override). One active
 *  version per job and scope; drafts are edited, active and retired ones never change. */
export const compensationSettings = sqliteTable('compensation_settings', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  jobId: integer('job_id').notNull().references(() => jobs.id),
  machineId: text('machine_id').references(() => machines.id), // null: every machine on the job
  version: integer('version').notNull(), // 1, 2, … per job
  status: text('status', { enum: ['draft', 'active', 'retired'] }).notNull(),
  /** the tuning (shared/utils/compensation-tuning.ts), checked with the engine's settings schema */
  settings: text('settings', { mode: 'json' }).$type<Record<string, unknown>>().notNull(),
  note: text('note'),
  reason: text('reason'), // why it was put in force
  createdBy: integer('created_by').notNull(),
  createdAt: integer('created_at').notNull(),
  updatedAt: integer('updated_at').notNull(),
  activatedBy: integer('activated_by'),
  activatedAt: integer('activated_at'),
  retiredAt: integer('retired_at'),
}, t => [uniqueIndex('compensation_settings_job_version').on(t.jobId, t.version), index('compensation_settings_job_status').on(t.jobId, t.status)])

// ── Overnight report: notes left during a shift, and the hand-over sign-off ─────────────────

/** A note left during the shift (machine optional); shown in the report of the shift it falls in. */
export const shiftNotes = sqliteTable('shift_notes', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id'),
  text: text('text').notNull(),
  userId: integer('user_id').notNull().references(() => users.id),
  at: integer('at').notNull(),
}, t => [index('shift_notes_at').on(t.at)])

/** The incoming lead's signature on a shift's report, with a comment (also in the audit log). */
export const reportSignoffs = sqliteTable('report_signoffs', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  cellId: text('cell_id').notNull().references(() => cells.id),
  shiftId: text('shift_id').notNull(),
  shiftDate: text('shift_date').notNull(), // local date the shift started, YYYY-MM-DD
  from: integer('from').notNull(),
  to: integer('to').notNull(),
  userId: integer('user_id').notNull().references(() => users.id),
  comment: text('comment').notNull(),
  at: integer('at').notNull(),
}, t => [index('report_signoffs_shift').on(t.cellId, t.shiftId, t.shiftDate)])

// ── Live cell: stations at the machines, alarm notes and photos ─────────────────────────────

/** A terminal registered to one machine. The one-time code and the device token are kept hashed. */
export const stations = sqliteTable('stations', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull().references(() => machines.id),
  codeHash: text('code_hash').notNull(),
  codeExpiresAt: integer('code_expires_at').notNull(),
  tokenHash: text('token_hash'), // set when the device redeems the code
  redeemedAt: integer('redeemed_at'),
  issuedBy: integer('issued_by').notNull(),
  issuedAt: integer('issued_at').notNull(),
  revokedAt: integer('revoked_at'),
}, t => [uniqueIndex('stations_code').on(t.codeHash), index('stations_token').on(t.tokenHash)])

/** Short PINs for signing in at a station (scrypt hash), one per person. */
export const stationPins = sqliteTable('station_pins', {
  userId: integer('user_id').primaryKey().references(() => users.id),
  pinHash: text('pin_hash').notNull(),
  updatedAt: integer('updated_at').notNull(),
})

/** What people log at the machine: dress, wheel change, gauge mastering, a note. */
export const stationLog = sqliteTable('station_log', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id').notNull(),
  at: integer('at').notNull(), // server time
  machineTime: integer('machine_time'), // the machine's clock at that moment (its last reading), for charts
  userId: integer('user_id').notNull(),
  kind: text('kind').notNull(), // dress | wheel-change | mastering | note | hand-measurement
  note: text('note'),
  /** dress: the amount dressed off (µm, as the operator gives it); hand-measurement: the size measured (µm from nominal) */
  valueUm: real('value_um'),
}, t => [index('station_log_machine_at').on(t.machineId, t.at)])

/** Notes and photos on an alarm. Photos live under <data>/uploads/<sha256>; only the hash is here. */
export const alarmNotes = sqliteTable('alarm_notes', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  alarmId: integer('alarm_id').notNull().references(() => alarms.id),
  at: integer('at').notNull(),
  userId: integer('user_id').notNull(),
  where: text('where').notNull(),
  text: text('text'),
  photoSha256: text('photo_sha256'),
  photoType: text('photo_type'),
  photoBytes: integer('photo_bytes'),
}, t => [index('alarm_notes_alarm').on(t.alarmId)])

// ── Retention: raw readings older than OWLSHIFT_RETENTION_DAYS are folded into hourly summaries ──
export const readingHours = sqliteTable('reading_hours', {
  machineId: text('machine_id').notNull(),
  hourStart: integer('hour_start').notNull(), // machine clock, ms, on the hour (UTC)
  jobPartNumber: text('job_part_number').notNull().default(''),
  n: integer('n').notNull(), // readings with a diameter
  faults: integer('faults').notNull(), // gauge faults / over range
  sumUm: real('sum_um').notNull(),
  sumSqUm: real('sum_sq_um').notNull(),
  minUm: real('min_um'),
  maxUm: real('max_um'),
}, t => [uniqueIndex('reading_hours_key').on(t.machineId, t.hourStart, t.jobPartNumber)])

/**
 * What retention leaves of the raw rows it folds other than readings (server/utils/storage/retention.ts,
 * docs/storage.md#retention): counts per machine and hour. Cycle events and machine answers are
 * placed by the machine's clock, decisions and commands by the server's. Additive: a pass that
 * folds part of an hour adds to its row, so raw rows and summaries never count the same thing.
 */
export const activityHours = sqliteTable('activity_hours', {
  machineId: text('machine_id').notNull(),
  hourStart: integer('hour_start').notNull(),
  partsLoaded: integer('parts_loaded').notNull().default(0),
  partsGround: integer('parts_ground').notNull().default(0),
  partsGauged: integer('parts_gauged').notNull().default(0),
  /** parts unloaded good, and rejected by reason (none stated: unspecified) */
  partsGood: integer('parts_good').notNull().default(0),
  rejectsOversize: integer('rejects_oversize').notNull().default(0),
  rejectsUndersize: integer('rejects_undersize').notNull().default(0),
  rejectsRoundness: integer('rejects_roundness').notNull().default(0),
  rejectsNotMeasured: integer('rejects_not_measured').notNull().default(0),
  rejectsUnspecified: integer('rejects_unspecified').notNull().default(0),
  /** offsets the machine applied: how many, Σ and largest |step| (µm), the last one and its machine time */
  offsetsApplied: integer('offsets_applied').notNull().default(0),
  offsetStepSumUm: real('offset_step_sum_um').notNull().default(0),
  offsetStepMaxUm: real('offset_step_max_um').notNull().default(0),
  offsetLastUm: real('offset_last_um'),
  offsetLastTime: integer('offset_last_time'),
  offsetsRejected: integer('offsets_rejected').notNull().default(0),
  offsetsExpired: integer('offsets_expired').notNull().default(0),
  /** the machine's other answers (dress, hold, resume, allowance) */
  answers: integer('answers').notNull().default(0),
  decisionsOffset: integer('decisions_offset').notNull().default(0),
  decisionsHold: integer('decisions_hold').notNull().default(0),
  decisionsStop: integer('decisions_stop').notNull().default(0),
  decisionsDress: integer('decisions_dress').notNull().default(0),
  /** decisions that changed nothing but raised an alert */
  decisionsAlerted: integer('decisions_alerted').notNull().default(0),
  commands: integer('commands').notNull().default(0),
  commandsApplied: integer('commands_applied').notNull().default(0),
  commandsRejected: integer('commands_rejected').notNull().default(0),
  commandsExpired: integer('commands_expired').notNull().default(0),
}, t => [primaryKey({ columns: [t.machineId, t.hourStart] })])

/**
 * A stretch an engineer keeps raw ("keep a night"): retention folds nothing of it, on one machine
 * or (machine null) on every machine, until the pin is taken away (audited both ways).
 */
export const retentionPins = sqliteTable('retention_pins', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  machineId: text('machine_id'),
  /** machine time, ms */
  from: integer('from').notNull(),
  to: integer('to').notNull(),
  note: text('note').notNull(),
  userId: integer('user_id').notNull(),
  at: integer('at').notNull(),
})

// ── Shift-end summary e-mail: who asked for it, and each shift's sending (once per shift) ─────
/** A user who wants the summary of each shift by e-mail when it ends. */
export const shiftSummarySubscriptions = sqliteTable('shift_summary_subscriptions', {
  userId: integer('user_id').primaryKey().references(() => users.id),
  createdAt: integer('created_at').notNull(),
})

/** One row per cell and shift, claimed before sending, so a shift's summary goes out once across restarts. */
export const shiftSummarySends = sqliteTable('shift_summary_sends', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  cellId: text('cell_id').notNull(),
  shiftId: text('shift_id').notNull(),
  shiftDate: text('shift_date').notNull(), // local date the shift started
  shiftEnd: integer('shift_end').notNull(),
  claimedAt: integer('claimed_at').notNull(),
  status: text('status').notNull(), // sending | sent | failed | nobody (no subscriber)
  recipients: integer('recipients').notNull().default(0),
  failed: integer('failed').notNull().default(0),
  detail: text('detail'),
}, t => [uniqueIndex('shift_summary_sends_shift').on(t.cellId, t.shiftId, t.shiftDate)])

// ── Owlshift's own runs: when it started, when it was last known alive, how it stopped ───────────

/**
 * One row per server run. `aliveAt` is written every few seconds (server/utils/health/heartbeat.ts): a run
 * that ends without `stoppedAt` was killed or lost its box, and the next run's start closes the gap —
 * the morning report shows it as an outage (docs/operations.md#when-owlshift-itself-goes-quiet).
 */
export const serverRuns = sqliteTable('server_runs', {
  id: integer('id').primaryKey({ autoIncrement: true }),
  startedAt: integer('started_at').notNull(),
  aliveAt: integer('alive_at').notNull(),
  /** a stop on purpose (SIGTERM): when, and null while running or after a crash */
  stoppedAt: integer('stopped_at'),
  stopReason: text('stop_reason'),
}, t => [index('server_runs_started').on(t.startedAt)])
