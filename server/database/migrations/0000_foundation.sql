CREATE TABLE `audit_log` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`at` integer NOT NULL,
	`actor_id` integer,
	`actor_email` text,
	`origin` text NOT NULL,
	`action` text NOT NULL,
	`target` text,
	`detail` text
);
--> statement-breakpoint
CREATE INDEX `audit_at` ON `audit_log` (`at`);--> statement-breakpoint
CREATE INDEX `audit_action` ON `audit_log` (`action`);--> statement-breakpoint
CREATE TABLE `cells` (
	`id` text PRIMARY KEY NOT NULL,
	`name` text NOT NULL,
	`time_zone` text DEFAULT 'UTC' NOT NULL
);
--> statement-breakpoint
CREATE TABLE `jobs` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`part_number` text NOT NULL,
	`description` text NOT NULL,
	`material` text NOT NULL,
	`method` text NOT NULL,
	`nominal_mm` text NOT NULL,
	`upper_tol_nm` integer NOT NULL,
	`lower_tol_nm` integer NOT NULL,
	`iso_fit` text,
	`roundness_limit_nm` integer,
	`wheel_spec` text,
	`parts_per_pallet` integer DEFAULT 100 NOT NULL,
	`cycle_time_s` integer DEFAULT 20 NOT NULL,
	`archived` integer DEFAULT false NOT NULL,
	`created_at` integer NOT NULL
);
--> statement-breakpoint
CREATE UNIQUE INDEX `jobs_part_number_unique` ON `jobs` (`part_number`);--> statement-breakpoint
CREATE TABLE `machines` (
	`id` text PRIMARY KEY NOT NULL,
	`cell_id` text NOT NULL,
	`name` text NOT NULL,
	`model` text NOT NULL,
	`current_job_id` integer,
	`sort_order` integer DEFAULT 0 NOT NULL,
	`created_at` integer NOT NULL,
	FOREIGN KEY (`cell_id`) REFERENCES `cells`(`id`) ON UPDATE no action ON DELETE no action,
	FOREIGN KEY (`current_job_id`) REFERENCES `jobs`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE TABLE `settings_kv` (
	`key` text PRIMARY KEY NOT NULL,
	`value` text NOT NULL
);
--> statement-breakpoint
CREATE TABLE `sign_in_failures` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`at` integer NOT NULL,
	`email` text NOT NULL,
	`address` text NOT NULL
);
--> statement-breakpoint
CREATE INDEX `sif_email_at` ON `sign_in_failures` (`email`,`at`);--> statement-breakpoint
CREATE INDEX `sif_address_at` ON `sign_in_failures` (`address`,`at`);--> statement-breakpoint
CREATE TABLE `users` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`email` text NOT NULL,
	`name` text NOT NULL,
	`role` text NOT NULL,
	`password_hash` text NOT NULL,
	`unit_system` text DEFAULT 'metric' NOT NULL,
	`disabled` integer DEFAULT false NOT NULL,
	`created_at` integer NOT NULL,
	`updated_at` integer NOT NULL
);
--> statement-breakpoint
CREATE UNIQUE INDEX `users_email_unique` ON `users` (`email`);