CREATE TABLE `compensation_settings` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`job_id` integer NOT NULL,
	`machine_id` text,
	`version` integer NOT NULL,
	`status` text NOT NULL,
	`settings` text NOT NULL,
	`note` text,
	`reason` text,
	`created_by` integer NOT NULL,
	`created_at` integer NOT NULL,
	`updated_at` integer NOT NULL,
	`activated_by` integer,
	`activated_at` integer,
	`retired_at` integer,
	FOREIGN KEY (`job_id`) REFERENCES `jobs`(`id`) ON UPDATE no action ON DELETE no action,
	FOREIGN KEY (`machine_id`) REFERENCES `machines`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE UNIQUE INDEX `compensation_settings_job_version` ON `compensation_settings` (`job_id`,`version`);--> statement-breakpoint
CREATE INDEX `compensation_settings_job_status` ON `compensation_settings` (`job_id`,`status`);--> statement-breakpoint
ALTER TABLE `jobs` ADD `length_mm` text;--> statement-breakpoint
ALTER TABLE `jobs` ADD `length_upper_tol_nm` integer;--> statement-breakpoint
ALTER TABLE `jobs` ADD `length_lower_tol_nm` integer;