-- Retention of everything (issue 22): hourly counts of what it folds besides readings, and the stretches engineers keep raw.
CREATE TABLE `activity_hours` (
	`machine_id` text NOT NULL,
	`hour_start` integer NOT NULL,
	`parts_loaded` integer DEFAULT 0 NOT NULL,
	`parts_ground` integer DEFAULT 0 NOT NULL,
	`parts_gauged` integer DEFAULT 0 NOT NULL,
	`parts_good` integer DEFAULT 0 NOT NULL,
	`rejects_oversize` integer DEFAULT 0 NOT NULL,
	`rejects_undersize` integer DEFAULT 0 NOT NULL,
	`rejects_roundness` integer DEFAULT 0 NOT NULL,
	`rejects_not_measured` integer DEFAULT 0 NOT NULL,
	`rejects_unspecified` integer DEFAULT 0 NOT NULL,
	`offsets_applied` integer DEFAULT 0 NOT NULL,
	`offset_step_sum_um` real DEFAULT 0 NOT NULL,
	`offset_step_max_um` real DEFAULT 0 NOT NULL,
	`offset_last_um` real,
	`offset_last_time` integer,
	`offsets_rejected` integer DEFAULT 0 NOT NULL,
	`offsets_expired` integer DEFAULT 0 NOT NULL,
	`answers` integer DEFAULT 0 NOT NULL,
	`decisions_offset` integer DEFAULT 0 NOT NULL,
	`decisions_hold` integer DEFAULT 0 NOT NULL,
	`decisions_stop` integer DEFAULT 0 NOT NULL,
	`decisions_dress` integer DEFAULT 0 NOT NULL,
	`decisions_alerted` integer DEFAULT 0 NOT NULL,
	`commands` integer DEFAULT 0 NOT NULL,
	`commands_applied` integer DEFAULT 0 NOT NULL,
	`commands_rejected` integer DEFAULT 0 NOT NULL,
	`commands_expired` integer DEFAULT 0 NOT NULL,
	PRIMARY KEY(`machine_id`, `hour_start`)
) WITHOUT ROWID;
--> statement-breakpoint
CREATE TABLE `retention_pins` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text,
	`from` integer NOT NULL,
	`to` integer NOT NULL,
	`note` text NOT NULL,
	`user_id` integer NOT NULL,
	`at` integer NOT NULL
);
