// Retention: raw readings received before the cut-off are folded into hourly summaries per machine and
// job (count, sum, sum of squares, min, max — enough for means, σ and counts over any range of
// whole hours) and then removed, in one transaction per run.
import { sql } from 'drizzle-orm'

export async function foldOldReadings(retentionDays: number, now = Date.now()): Promise<{ folded: number }> {
  if (retentionDays <= 0) return { folded: 0 }
  // The cut-off is on the server's clock (received_at): a machine with a wrong clock must not get
  // its fresh readings folded away. The hour buckets keep the machine's own time.
  const cutoff = now - retentionDays * 86_400_000
  const hour = sql`(${schema.readings.time} / 3600000) * 3600000`
  const db = useDb()
  const [{ n }] = await db.select({ n: sql<number>`count(*)` }).from(schema.readings).where(sql`${schema.readings.receivedAt} < ${cutoff}`) as [{ n: number }]
  if (!n) return { folded: 0 }
  await db.batch([
    db.run(sql`
      insert into reading_hours (machine_id, hour_start, job_part_number, n, faults, sum_um, sum_sq_um, min_um, max_um)
      select machine_id, ${hour}, coalesce(job_part_number, ''),
             count(diameter_um), sum(case when diameter_um is null then 1 else 0 end),
             coalesce(sum(diameter_um), 0), coalesce(sum(diameter_um * diameter_um), 0), min(diameter_um), max(diameter_um)
      from readings where received_at < ${cutoff}
      group by machine_id, ${hour}, coalesce(job_part_number, '')
      on conflict (machine_id, hour_start, job_part_number) do update set
        n = n + excluded.n, faults = faults + excluded.faults, sum_um = sum_um + excluded.sum_um,
        sum_sq_um = sum_sq_um + excluded.sum_sq_um,
        min_um = min(coalesce(min_um, excluded.min_um), coalesce(excluded.min_um, min_um)),
        max_um = max(coalesce(max_um, excluded.max_um), coalesce(excluded.max_um, max_um))`),
    db.run(sql`delete from readings where received_at < ${cutoff}`),
  ])
  return { folded: Number(n) }
}
