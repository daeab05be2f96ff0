CREATE TABLE `alarm_transitions` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`alarm_id` integer NOT NULL,
	`at` integer NOT NULL,
	`from_state` text NOT NULL,
	`to_state` text NOT NULL,
	`action` text NOT NULL,
	`user_id` integer,
	`where` text NOT NULL,
	`note` text,
	FOREIGN KEY (`alarm_id`) REFERENCES `alarms`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE INDEX `alarm_transitions_alarm` ON `alarm_transitions` (`alarm_id`);--> statement-breakpoint
CREATE INDEX `alarm_transitions_at` ON `alarm_transitions` (`at`);--> statement-breakpoint
CREATE TABLE `alarms` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text,
	`condition` text NOT NULL,
	`priority` integer NOT NULL,
	`state` text NOT NULL,
	`active` integer NOT NULL,
	`latching` integer DEFAULT false NOT NULL,
	`message` text NOT NULL,
	`raised_at` integer NOT NULL,
	`last_change_at` integer NOT NULL,
	`activations` integer DEFAULT 1 NOT NULL,
	`record` text NOT NULL,
	`closed_at` integer
);
--> statement-breakpoint
CREATE INDEX `alarms_open` ON `alarms` (`closed_at`,`priority`);--> statement-breakpoint
CREATE INDEX `alarms_machine_condition` ON `alarms` (`machine_id`,`condition`);--> statement-breakpoint
CREATE TABLE `commands` (
	`id` text PRIMARY KEY NOT NULL,
	`machine_id` text NOT NULL,
	`type` text NOT NULL,
	`origin` text NOT NULL,
	`payload` text NOT NULL,
	`issued_at` integer NOT NULL,
	`expires_at` integer NOT NULL,
	`status` text NOT NULL,
	`requested_offset_um` real,
	`applied_offset_um` real,
	`ack_at` integer,
	`ack_reason` text
);
--> statement-breakpoint
CREATE INDEX `commands_machine_issued` ON `commands` (`machine_id`,`issued_at`);--> statement-breakpoint
CREATE TABLE `dead_letters` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`received_at` integer NOT NULL,
	`client_id` text,
	`machine_id` text,
	`topic` text NOT NULL,
	`reason` text NOT NULL,
	`payload` text NOT NULL,
	`payload_bytes` integer NOT NULL
);
--> statement-breakpoint
CREATE INDEX `dead_machine_at` ON `dead_letters` (`machine_id`,`received_at`);--> statement-breakpoint
CREATE TABLE `decisions` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`seq` integer NOT NULL,
	`at` integer NOT NULL,
	`action` text NOT NULL,
	`correction_um` real,
	`offset_um` real NOT NULL,
	`command_id` text,
	`reason` text NOT NULL,
	`inputs` text NOT NULL,
	`alerts` text
);
--> statement-breakpoint
CREATE INDEX `decisions_machine_at` ON `decisions` (`machine_id`,`at`);--> statement-breakpoint
CREATE TABLE `machine_messages` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`seq` integer NOT NULL,
	`kind` text NOT NULL,
	`type` text,
	`time` integer NOT NULL,
	`received_at` integer NOT NULL,
	`payload` text NOT NULL
);
--> statement-breakpoint
CREATE UNIQUE INDEX `messages_machine_seq` ON `machine_messages` (`machine_id`,`seq`);--> statement-breakpoint
CREATE INDEX `messages_machine_time` ON `machine_messages` (`machine_id`,`time`);--> statement-breakpoint
CREATE TABLE `machine_status` (
	`machine_id` text PRIMARY KEY NOT NULL,
	`online` integer DEFAULT false NOT NULL,
	`session` integer,
	`execution` text,
	`active_faults` text DEFAULT '[]' NOT NULL,
	`last_seq` integer DEFAULT 0 NOT NULL,
	`last_message_at` integer,
	`last_reading_at` integer,
	`last_cycle_at` integer,
	`last_diameter_um` real,
	`parts_good` integer DEFAULT 0 NOT NULL,
	`parts_scrap` integer DEFAULT 0 NOT NULL,
	`blanks_left` integer,
	`cycle_time_s` real,
	`applied_offset_um` real,
	`requested_offset_um` real,
	`job_part_number` text,
	`engine_state` text,
	`prediction` text,
	`updated_at` integer NOT NULL,
	FOREIGN KEY (`machine_id`) REFERENCES `machines`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE TABLE `presence_log` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`at` integer NOT NULL,
	`online` integer NOT NULL,
	`session` integer,
	`reason` text
);
--> statement-breakpoint
CREATE INDEX `presence_machine_at` ON `presence_log` (`machine_id`,`at`);--> statement-breakpoint
CREATE TABLE `readings` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`seq` integer NOT NULL,
	`part` integer NOT NULL,
	`time` integer NOT NULL,
	`received_at` integer NOT NULL,
	`status` text NOT NULL,
	`diameter_um` real,
	`roundness_um` real,
	`length_um` real,
	`offset_um` real NOT NULL,
	`job_part_number` text
);
--> statement-breakpoint
CREATE UNIQUE INDEX `readings_machine_seq` ON `readings` (`machine_id`,`seq`);--> statement-breakpoint
CREATE INDEX `readings_machine_time` ON `readings` (`machine_id`,`time`);--> statement-breakpoint
CREATE TABLE `sequence_gaps` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`from_seq` integer NOT NULL,
	`to_seq` integer NOT NULL,
	`detected_at` integer NOT NULL
);
--> statement-breakpoint
CREATE INDEX `gaps_machine` ON `sequence_gaps` (`machine_id`);--> statement-breakpoint
ALTER TABLE `machines` ADD `mqtt_password_hash` text;--> statement-breakpoint
ALTER TABLE `machines` ADD `mqtt_rotated_at` integer;