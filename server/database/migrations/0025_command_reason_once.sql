-- An engine command's reason is its decision's (issue 22; shared/utils/command-rows.ts): a compact
-- command row whose reason is the one its decision states keeps `"d": 1` instead of the text.
-- Retention gives the reason back to a command still kept when it folds its decision.
UPDATE `commands` SET `payload` = json_set(json_remove(`commands`.`payload`, '$.r'), '$.d', 1)
FROM `decisions` AS `d`
WHERE `d`.`command_id` = `commands`.`id`
	AND json_valid(`commands`.`payload`) AND json_type(`commands`.`payload`, '$.i') IS NOT NULL
	AND json_type(`commands`.`payload`, '$.r') = 'text' AND json_extract(`commands`.`payload`, '$.r') = `d`.`reason`;
