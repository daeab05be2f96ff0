CREATE TABLE `server_runs` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`started_at` integer NOT NULL,
	`alive_at` integer NOT NULL,
	`stopped_at` integer,
	`stop_reason` text
);
--> statement-breakpoint
CREATE INDEX `server_runs_started` ON `server_runs` (`started_at`);