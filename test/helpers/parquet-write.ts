/**
 * Writes real Parquet files with DuckDB (`COPY … (FORMAT parquet)`) for reader tests. Rows go into a
 * temp table of raw values first; `select` then shapes the written columns (timestamp types, casts).
 */
import { mkdir, mkdtemp, rm } from 'node:fs/promises'
import { tmpdir } from 'node:os'
import { dirname, join } from 'node:path'
import { afterAll, beforeAll } from 'vitest'
import { type DuckDbSession, openDuckDb } from '../../src/dataset/duckdb.js'
import { quoteIdent, quoteString } from '../../src/dataset/sql.js'

export type RawType = 'DOUBLE' | 'BIGINT' | 'VARCHAR'
export type RawValue = number | bigint | string | null

export interface WriteOptions {
  /** SELECT list over the raw table `raw` (default `*`). */
  readonly select?: string
  readonly compression?: 'snappy' | 'zstd' | 'uncompressed'
  readonly rowGroupSize?: number
  /** false writes PLAIN pages (DICTIONARY_SIZE_LIMIT 1); default: DuckDB's dictionary pages. */
  readonly dictionary?: boolean
  /** Data page v2 (PARQUET_VERSION V2). */
  readonly pageV2?: boolean
}

function literal(v: RawValue, type: RawType): string {
  if (v === null) return 'NULL'
  if (typeof v === 'string') return quoteString(v)
  if (typeof v === 'bigint') return `CAST(${v} AS BIGINT)`
  if (Number.isNaN(v)) return "CAST('nan' AS DOUBLE)"
  if (v === Number.POSITIVE_INFINITY) return "CAST('inf' AS DOUBLE)"
  if (v === Number.NEGATIVE_INFINITY) return "CAST('-inf' AS DOUBLE)"
  return `CAST(${type === 'BIGINT' ? String(v) : v.toPrecision(17)} AS ${type})`
}

/** One DuckDB session shared by the writes of a test file. */
export class ParquetWriter {
  private constructor(private readonly db: DuckDbSession) {}

  static async open(): Promise<ParquetWriter> {
    return new ParquetWriter(await openDuckDb({ threads: 1 }))
  }

  /** The session, for cross-check queries in tests. */
  get session(): DuckDbSession {
    return this.db
  }

  async write(
    path: string,
    columns: Readonly<Record<string, RawType>>,
    rows: readonly (readonly RawValue[])[],
    options: WriteOptions = {},
  ): Promise<void> {
    await mkdir(dirname(path), { recursive: true })
    const names = Object.keys(columns)
    const types = Object.values(columns)
    await this.db.run('DROP TABLE IF EXISTS raw')
    await this.db.run(`CREATE TABLE raw (${names.map((n, i) => `${quoteIdent(n)} ${types[i]}`).join(', ')})`)
    for (let start = 0; start < rows.length; start += 500) {
      const part = rows.slice(start, start + 500)
      const values = part.map((r) => `(${r.map((v, i) => literal(v, types[i] ?? 'DOUBLE')).join(', ')})`).join(', ')
      await this.db.run(`INSERT INTO raw VALUES ${values}`)
    }
    const opts = [`FORMAT parquet`, `COMPRESSION ${options.compression ?? 'snappy'}`]
    if (options.rowGroupSize !== undefined) opts.push(`ROW_GROUP_SIZE ${options.rowGroupSize}`)
    if (options.dictionary === false) opts.push('DICTIONARY_SIZE_LIMIT 1')
    if (options.pageV2 === true) opts.push('PARQUET_VERSION V2')
    await this.db.run(
      `COPY (SELECT ${options.select ?? '*'} FROM raw ORDER BY rowid) TO ${quoteString(path)} (${opts.join(', ')})`,
    )
  }

  close(): void {
    this.db.close()
  }
}

/**
 * A temp folder and a ParquetWriter shared by the tests of one file: made before all of them, closed and removed
 * after. Read `dir` and `writer` inside tests only.
 */
export function useParquetScratch(prefix: string): { readonly dir: string; readonly writer: ParquetWriter } {
  let dir: string | null = null
  let writer: ParquetWriter | null = null
  beforeAll(async () => {
    dir = await mkdtemp(join(tmpdir(), prefix))
    writer = await ParquetWriter.open()
  })
  afterAll(async () => {
    writer?.close()
    if (dir !== null) await rm(dir, { recursive: true, force: true })
  })
  return {
    get dir(): string {
      if (dir === null) throw new Error('useParquetScratch: dir is made in beforeAll')
      return dir
    },
    get writer(): ParquetWriter {
      if (writer === null) throw new Error('useParquetScratch: writer is opened in beforeAll')
      return writer
    },
  }
}
