/**
 * Writes the demo fleet (src/demo/fleet.ts) as a small lake: Hive-partitioned Parquet by day,
 * written by DuckDB (a third-party writer), plus one site as an Arrow IPC stream file written by
 * apache-arrow, as a stream consumer would land it.
 */
import { mkdir, rm, writeFile } from 'node:fs/promises'
import path from 'node:path'
import { DuckDBInstance } from '@duckdb/node-api'
import {
  Dictionary,
  Float64,
  Int32,
  RecordBatchStreamWriter,
  Table,
  TimestampMillisecond,
  Utf8,
  vectorFromArray,
} from 'apache-arrow'
import { type FleetOptions, fleetRows } from './fleet.js'

/** Which site lands as Arrow IPC instead of Parquet. */
export const arrowSite = 'site-06'

export interface DemoLake {
  readonly dataDir: string
  readonly parquetRows: number
  readonly arrowRows: number
}

/** Writes the demo lake under `dataDir` (replacing it): `parquet/day=YYYY-MM-DD/*.parquet` and `arrow/site-06.arrows`. */
export async function writeDemoLake(dataDir: string, options: FleetOptions = {}): Promise<DemoLake> {
  await rm(dataDir, { recursive: true, force: true })
  await mkdir(path.join(dataDir, 'arrow'), { recursive: true })
  const instance = await DuckDBInstance.create(':memory:', { threads: '2' })
  const con = await instance.connect()
  const arrow = {
    site: [] as string[],
    unit: [] as string[],
    ts: [] as (Date | null)[],
    power_kw: [] as (number | null)[],
  }
  let parquetRows = 0
  try {
    await con.run("SET TimeZone = 'UTC'")
    await con.run('CREATE TABLE fleet (site VARCHAR, unit VARCHAR, ts_ms BIGINT, day VARCHAR, power_kw DOUBLE)')
    const appender = await con.createAppender('fleet')
    let lastTs = 0
    for (const r of fleetRows(options)) {
      if (r.ts !== null) lastTs = r.ts
      if (r.site === arrowSite) {
        arrow.site.push(r.site)
        arrow.unit.push(r.unit)
        arrow.ts.push(r.ts === null ? null : new Date(r.ts))
        arrow.power_kw.push(r.power_kw)
        continue
      }
      appender.appendVarchar(r.site)
      appender.appendVarchar(r.unit)
      if (r.ts === null) appender.appendNull()
      else appender.appendBigInt(BigInt(r.ts))
      appender.appendVarchar(new Date(lastTs).toISOString().slice(0, 10))
      if (r.power_kw === null) appender.appendNull()
      else appender.appendDouble(r.power_kw)
      appender.endRow()
      parquetRows++
    }
    appender.closeSync()
    const out = path.join(dataDir, 'parquet').replaceAll("'", "''")
    await con.run(
      `COPY (SELECT site, unit, CASE WHEN ts_ms IS NULL THEN NULL ELSE make_timestamp(ts_ms * 1000)::TIMESTAMPTZ END AS ts,
                    power_kw, day FROM fleet ORDER BY day, site, unit, ts_ms)
       TO '${out}' (FORMAT parquet, COMPRESSION zstd, PARTITION_BY (day), FILENAME_PATTERN 'part-{i}')`,
    )
  } finally {
    con.closeSync()
    instance.closeSync()
  }
  const table = new Table({
    site: vectorFromArray(arrow.site, new Dictionary(new Utf8(), new Int32())),
    unit: vectorFromArray(arrow.unit, new Dictionary(new Utf8(), new Int32())),
    ts: vectorFromArray(arrow.ts, new TimestampMillisecond('UTC')),
    power_kw: vectorFromArray(arrow.power_kw, new Float64()),
  })
  const bytes = RecordBatchStreamWriter.writeAll(table).toUint8Array(true)
  await writeFile(path.join(dataDir, 'arrow', `${arrowSite}.arrows`), bytes)
  return { dataDir, parquetRows, arrowRows: arrow.site.length }
}
