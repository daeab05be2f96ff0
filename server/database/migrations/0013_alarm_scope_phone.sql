ALTER TABLE `alarms` ADD `cell_id` text;--> statement-breakpoint
ALTER TABLE `alarms` ADD `machines` text;--> statement-breakpoint
ALTER TABLE `alarms` ADD `cause_alarm_id` integer;--> statement-breakpoint
ALTER TABLE `users` ADD `phone` text;