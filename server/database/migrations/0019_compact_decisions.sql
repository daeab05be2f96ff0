-- Decisions that changed nothing are no longer rows (issue 22): the engine's figures for each part
-- move to the reading (expected size, slope), back-filled here from the decision that answered it;
-- the rows that acted (offset, hold, stop, dress) or alerted are kept, and their JSON inputs become optional.
ALTER TABLE `readings` ADD `expected_nm` integer;--> statement-breakpoint
ALTER TABLE `readings` ADD `slope_pm` integer;--> statement-breakpoint
CREATE INDEX `decisions_backfill` ON `decisions` (`machine_id`,`seq`);--> statement-breakpoint
UPDATE `readings` SET `expected_nm` = d.`expected_nm`, `slope_pm` = d.`slope_pm` FROM (
	SELECT `machine_id`, `seq`,
		round((json_extract(`inputs`, '$.predictedUm') + coalesce(json_extract(`inputs`, '$.gain'), 1) * json_extract(`inputs`, '$.offsetForPartUm')) * 1000) AS `expected_nm`,
		round(coalesce(`slope_um_per_part`, json_extract(`inputs`, '$.slopeUmPerPart')) * 1000000) AS `slope_pm`
	FROM `decisions` WHERE `id` IN (SELECT min(`id`) FROM `decisions` WHERE json_extract(`inputs`, '$.event') IS NULL GROUP BY `machine_id`, `seq`)
) AS d WHERE d.`machine_id` = `readings`.`machine_id` AND d.`seq` = `readings`.`seq`;--> statement-breakpoint
CREATE TABLE `engine_snapshots` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`seq` integer NOT NULL,
	`at` integer NOT NULL,
	`time` integer NOT NULL,
	`state` text NOT NULL
);
--> statement-breakpoint
CREATE INDEX `engine_snapshots_machine_seq` ON `engine_snapshots` (`machine_id`,`seq`);--> statement-breakpoint
PRAGMA foreign_keys=OFF;--> statement-breakpoint
CREATE TABLE `__new_decisions` (
	`id` integer PRIMARY KEY AUTOINCREMENT NOT NULL,
	`machine_id` text NOT NULL,
	`seq` integer NOT NULL,
	`at` integer NOT NULL,
	`action` text NOT NULL,
	`correction_um` real,
	`offset_um` real NOT NULL,
	`command_id` text,
	`reason` text NOT NULL,
	`inputs` text,
	`alerts` text,
	`slope_um_per_part` real
);
--> statement-breakpoint
INSERT INTO `__new_decisions`("id", "machine_id", "seq", "at", "action", "correction_um", "offset_um", "command_id", "reason", "inputs", "alerts", "slope_um_per_part") SELECT "id", "machine_id", "seq", "at", "action", "correction_um", "offset_um", "command_id", "reason", "inputs", "alerts", "slope_um_per_part" FROM `decisions` WHERE `action` != 'none' OR `alerts` IS NOT NULL;--> statement-breakpoint
DROP TABLE `decisions`;--> statement-breakpoint
ALTER TABLE `__new_decisions` RENAME TO `decisions`;--> statement-breakpoint
PRAGMA foreign_keys=ON;--> statement-breakpoint
CREATE INDEX `decisions_machine_at` ON `decisions` (`machine_id`,`at`);
