CREATE TABLE `report_signoffs` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`cell_id` text NOT NULL,
	`shift_id` text NOT NULL,
	`shift_date` text NOT NULL,
	`from` integer NOT NULL,
	`to` integer NOT NULL,
	`user_id` integer NOT NULL,
	`comment` text NOT NULL,
	`at` integer NOT NULL,
	FOREIGN KEY (`cell_id`) REFERENCES `cells`(`id`) ON UPDATE no action ON DELETE no action,
	FOREIGN KEY (`user_id`) REFERENCES `users`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE INDEX `report_signoffs_shift` ON `report_signoffs` (`cell_id`,`shift_id`,`shift_date`);--> statement-breakpoint
CREATE TABLE `shift_notes` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text,
	`text` text NOT NULL,
	`user_id` integer NOT NULL,
	`at` integer NOT NULL,
	FOREIGN KEY (`user_id`) REFERENCES `users`(`id`) ON UPDATE no action ON DELETE no action
);
--> statement-breakpoint
CREATE INDEX `shift_notes_at` ON `shift_notes` (`at`);