CREATE TABLE `ended_sessions` (
	`sid` text PRIMARY KEY NOT NULL,
	`user_id` integer NOT NULL,
	`ended_at` integer NOT NULL,
	`expires_at` integer NOT NULL
);
--> statement-breakpoint
CREATE INDEX `ended_sessions_expires` ON `ended_sessions` (`expires_at`);--> statement-breakpoint
ALTER TABLE `users` ADD `session_generation` integer DEFAULT 0 NOT NULL;