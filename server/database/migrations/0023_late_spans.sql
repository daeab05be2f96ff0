CREATE TABLE `late_spans` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`cause` text NOT NULL,
	`from_seq` integer NOT NULL,
	`to_seq` integer NOT NULL,
	`ended_at` integer NOT NULL,
	`live_at` integer NOT NULL
);
--> statement-breakpoint
CREATE INDEX `late_spans_machine` ON `late_spans` (`machine_id`,`ended_at`);