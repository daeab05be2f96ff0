ALTER TABLE `machine_status` ADD `hold_causes` text;--> statement-breakpoint
ALTER TABLE `machines` ADD `resume_after_outage` text DEFAULT 'owlshift' NOT NULL;