CREATE TABLE `alarm_notes` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`alarm_id` integer NOT NULL,
	`at` integer NOT NULL,
	`user_id` integer NOT NULL,
	`where` text NOT NULL,
	`text` text,
	`photo_sha256` text,
	`photo_type` text,
	`photo_bytes` integer,
	FOREIGN KEY (`alarm_id`) REFERENCES `alarms`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE INDEX `alarm_notes_alarm` ON `alarm_notes` (`alarm_id`);--> statement-breakpoint
CREATE TABLE `station_log` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`at` integer NOT NULL,
	`machine_time` integer,
	`user_id` integer NOT NULL,
	`kind` text NOT NULL,
	`note` text
);
--> statement-breakpoint
CREATE INDEX `station_log_machine_at` ON `station_log` (`machine_id`,`at`);--> statement-breakpoint
CREATE TABLE `station_pins` (
	`user_id` integer PRIMARY KEY NOT NULL,
	`pin_hash` text NOT NULL,
	`updated_at` integer NOT NULL,
	FOREIGN KEY (`user_id`) REFERENCES `users`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE TABLE `stations` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`code_hash` text NOT NULL,
	`code_expires_at` integer NOT NULL,
	`token_hash` text,
	`redeemed_at` integer,
	`issued_by` integer NOT NULL,
	`issued_at` integer NOT NULL,
	`revoked_at` integer,
	FOREIGN KEY (`machine_id`) REFERENCES `machines`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE UNIQUE INDEX `stations_code` ON `stations` (`code_hash`);--> statement-breakpoint
CREATE INDEX `stations_token` ON `stations` (`token_hash`);