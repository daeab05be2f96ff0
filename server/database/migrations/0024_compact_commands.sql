-- A command row keeps its message in compact form (issue 22; shared/utils/command-rows.ts): the id
-- and type are the row's columns, the machine-clock times become numbers (the issue time as ms
-- after issued_at, the expiry as ms after the issue time), and the rest keeps short keys (o offset,
-- r reason, a allowance as [throughPart, basedOnSeq]). A row this cannot give back field for field
-- (another key, an id or type unlike the row's, a time not written as toISOString writes it) keeps
-- its times as text, or its whole message; commandFromRow reads every form.
UPDATE `commands` SET `payload` = json_patch(
	json_object(
		'i', CASE WHEN strftime('%Y-%m-%dT%H:%M:%fZ', `payload` ->> '$.issuedAt') = `payload` ->> '$.issuedAt'
			THEN CAST(round((julianday(`payload` ->> '$.issuedAt') - 2440587.5) * 86400000) AS INTEGER) - `issued_at`
			ELSE `payload` ->> '$.issuedAt' END,
		'e', CASE WHEN strftime('%Y-%m-%dT%H:%M:%fZ', `payload` ->> '$.issuedAt') = `payload` ->> '$.issuedAt'
				AND strftime('%Y-%m-%dT%H:%M:%fZ', `payload` ->> '$.expiresAt') = `payload` ->> '$.expiresAt'
			THEN CAST(round((julianday(`payload` ->> '$.expiresAt') - julianday(`payload` ->> '$.issuedAt')) * 86400000) AS INTEGER)
			ELSE `payload` ->> '$.expiresAt' END),
	json_object(
		'o', json(`payload` -> '$.offsetUm'),
		'r', `payload` ->> '$.reason',
		'a', json(CASE WHEN json_type(`payload`, '$.allowance') = 'object'
			THEN json_array(json(`payload` -> '$.allowance.throughPart'), json(`payload` -> '$.allowance.basedOnSeq')) END)))
WHERE json_valid(`payload`) AND `payload` ->> '$.kind' = 'command'
	AND `payload` ->> '$.id' = `id` AND `payload` ->> '$.type' = `type`
	AND json_type(`payload`, '$.issuedAt') = 'text' AND json_type(`payload`, '$.expiresAt') = 'text'
	AND NOT EXISTS (SELECT 1 FROM json_each(`payload`) WHERE `key` NOT IN ('kind', 'type', 'id', 'issuedAt', 'expiresAt', 'offsetUm', 'reason', 'allowance'))
	AND (json_type(`payload`, '$.reason') IS NULL OR json_type(`payload`, '$.reason') = 'text')
	AND (json_type(`payload`, '$.offsetUm') IS NULL OR json_type(`payload`, '$.offsetUm') IN ('integer', 'real'))
	AND (json_type(`payload`, '$.allowance') IS NULL OR (json_type(`payload`, '$.allowance') = 'object'
		AND json_type(`payload`, '$.allowance.throughPart') = 'integer' AND json_type(`payload`, '$.allowance.basedOnSeq') = 'integer'
		AND NOT EXISTS (SELECT 1 FROM json_each(`payload`, '$.allowance') WHERE `key` NOT IN ('throughPart', 'basedOnSeq'))));
