CREATE TABLE `shift_summary_sends` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`cell_id` text NOT NULL,
	`shift_id` text NOT NULL,
	`shift_date` text NOT NULL,
	`shift_end` integer NOT NULL,
	`claimed_at` integer NOT NULL,
	`status` text NOT NULL,
	`recipients` integer DEFAULT 0 NOT NULL,
	`failed` integer DEFAULT 0 NOT NULL,
	`detail` text
);
--> statement-breakpoint
CREATE UNIQUE INDEX `shift_summary_sends_shift` ON `shift_summary_sends` (`cell_id`,`shift_id`,`shift_date`);--> statement-breakpoint
CREATE TABLE `shift_summary_subscriptions` (
	`user_id` integer PRIMARY KEY NOT NULL,
	`created_at` integer NOT NULL,
	FOREIGN KEY (`user_id`) REFERENCES `users`(`id`) ON UPDATE no action ON DELETE no action
);
