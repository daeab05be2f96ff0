-- The messages of every part (part loaded, ground, gauged, unloaded) and the machine's "offset
-- applied" answers leave machine_messages for a compact table without rowid, keyed by machine time
-- (issue 22; shared/utils/cycle-events.ts). Rows stored before move over with every field.
CREATE TABLE `cycle_events` (
	`time` integer NOT NULL,
	`machine_id` text NOT NULL,
	`seq` integer NOT NULL,
	`code` integer NOT NULL,
	`part` integer,
	`n` integer,
	`a` real,
	`b` real,
	`text` text,
	PRIMARY KEY(`time`, `machine_id`, `seq`)
) WITHOUT ROWID;
--> statement-breakpoint
INSERT INTO `cycle_events` (`time`, `machine_id`, `seq`, `code`, `part`, `n`, `a`, `b`, `text`)
SELECT `time`, `machine_id`, `seq`,
	CASE `type` WHEN 'part_loaded' THEN 1 WHEN 'part_ground' THEN 2 WHEN 'part_gauged' THEN 3
		WHEN 'part_unloaded' THEN CASE json_extract(`payload`, '$.disposition') WHEN 'good' THEN 4 ELSE 5 END ELSE 6 END,
	CASE WHEN `type` = 'offset:applied' THEN NULL ELSE json_extract(`payload`, '$.part') END,
	CASE WHEN `type` = 'part_loaded' THEN json_extract(`payload`, '$.blanksLeft') END,
	CASE WHEN `type` IN ('part_ground', 'offset:applied') THEN json_extract(`payload`, '$.offsetUm') END,
	CASE `type` WHEN 'part_ground' THEN json_extract(`payload`, '$.wheelDiameterMm') WHEN 'offset:applied' THEN json_extract(`payload`, '$.requestedOffsetUm') END,
	CASE `type` WHEN 'part_loaded' THEN json_extract(`payload`, '$.palletId') WHEN 'part_unloaded' THEN json_extract(`payload`, '$.rejectReason') WHEN 'offset:applied' THEN json_extract(`payload`, '$.commandId') END
FROM `machine_messages`
WHERE `type` IN ('part_loaded', 'part_ground', 'part_gauged', 'part_unloaded') OR (`type` = 'offset:applied' AND json_extract(`payload`, '$.reason') IS NULL)
ON CONFLICT DO NOTHING;
--> statement-breakpoint
DELETE FROM `machine_messages` WHERE `type` IN ('part_loaded', 'part_ground', 'part_gauged', 'part_unloaded') OR (`type` = 'offset:applied' AND json_extract(`payload`, '$.reason') IS NULL);
--> statement-breakpoint
DROP INDEX IF EXISTS `messages_rejects`;
