CREATE TABLE `reading_hours` (
	`machine_id` text NOT NULL,
	`hour_start` integer NOT NULL,
	`job_part_number` text DEFAULT '' NOT NULL,
	`n` integer NOT NULL,
	`faults` integer NOT NULL,
	`sum_um` real NOT NULL,
	`sum_sq_um` real NOT NULL,
	`min_um` real,
	`max_um` real
);
--> statement-breakpoint
CREATE UNIQUE INDEX `reading_hours_key` ON `reading_hours` (`machine_id`,`hour_start`,`job_part_number`);