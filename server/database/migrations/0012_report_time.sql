ALTER TABLE `alarm_transitions` ADD `machine_at` integer;--> statement-breakpoint
CREATE INDEX `alarm_transitions_machine_at` ON `alarm_transitions` (`machine_at`);--> statement-breakpoint
ALTER TABLE `presence_log` ADD `machine_time` integer;--> statement-breakpoint
CREATE INDEX `presence_machine_time` ON `presence_log` (`machine_id`,`machine_time`);