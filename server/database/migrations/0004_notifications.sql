CREATE TABLE `alert_tracks` (
	`alarm_id` integer PRIMARY KEY NOT NULL,
	`track` text NOT NULL,
	`updated_at` integer NOT NULL,
	FOREIGN KEY (`alarm_id`) REFERENCES `alarms`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE TABLE `notification_deliveries` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`at` integer NOT NULL,
	`alarm_id` integer,
	`user_id` integer,
	`channel` text NOT NULL,
	`level` integer DEFAULT 0 NOT NULL,
	`status` text NOT NULL,
	`subscription_id` integer,
	`detail` text
);
--> statement-breakpoint
CREATE INDEX `notification_deliveries_alarm` ON `notification_deliveries` (`alarm_id`);--> statement-breakpoint
CREATE INDEX `notification_deliveries_at` ON `notification_deliveries` (`at`);--> statement-breakpoint
CREATE TABLE `push_subscriptions` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`user_id` integer NOT NULL,
	`endpoint` text NOT NULL,
	`p256dh` text NOT NULL,
	`auth` text NOT NULL,
	`label` text NOT NULL,
	`created_at` integer NOT NULL,
	`last_sent_at` integer,
	`last_error` text,
	FOREIGN KEY (`user_id`) REFERENCES `users`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE UNIQUE INDEX `push_subscriptions_endpoint` ON `push_subscriptions` (`endpoint`);--> statement-breakpoint
CREATE INDEX `push_subscriptions_user` ON `push_subscriptions` (`user_id`);--> statement-breakpoint
CREATE TABLE `vapid_keys` (
	`id` integer PRIMARY KEY NOT NULL,
	`public_key` text NOT NULL,
	`private_key` text NOT NULL,
	`created_at` integer NOT NULL
);
