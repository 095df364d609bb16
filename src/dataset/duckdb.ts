/**
 * A small wrapper around one embedded DuckDB instance and connection (`@duckdb/node-api`), the engine
 * design.md picks for Parquet → moments and for writing Parquet. It fixes the settings every caller
 * needs: thread count and memory limit from options, session time zone UTC (so no cast depends on the
 * host's zone), and no extension auto-install (the worker runs offline; ICU and Parquet are built in).
 */
import { type DuckDBConnection, DuckDBInstance, type DuckDBMaterializedResult } from '@duckdb/node-api'

export interface DuckDbOptions {
  /** Worker threads DuckDB may use (≥ 1). */
  readonly threads: number
  /** DuckDB memory limit such as `512MB` or `2GiB` (default: DuckDB's own, 80% of RAM). */
  readonly memoryLimit?: string
  /**
   * Folder for data DuckDB spills beyond `memoryLimit` (created when first needed, emptied on close).
   * Default: DuckDB's own, `.tmp` in the process's working folder, which a scheduled job may not own.
   */
  readonly tempDirectory?: string
  /**
   * Track how far a running query of the first connection is (`DuckDbSession.progress`). DuckDB computes it only
   * when asked to; measured on the bench scan, it costs nothing visible.
   */
  readonly trackProgress?: boolean
}

/** One open instance + connection. Close it when done; `close()` is idempotent. */
export interface DuckDbSession {
  readonly connection: DuckDBConnection
  /** Runs one statement and returns the fully materialized result. */
  run(sql: string): Promise<DuckDBMaterializedResult>
  /** Asks the running query to stop; it then rejects with an "interrupted" error. */
  interrupt(): void
  /**
   * How far the running query of the first connection is, 0 … 1, as DuckDB estimates it from the rows its scans
   * have read; null when no query runs or the session was opened without `trackProgress`.
   */
  progress(): number | null
  /**
   * Another connection to the same instance (UTC session zone), for statements that should run in
   * parallel with the first; closed with the session.
   */
  connect(): Promise<DuckDBConnection>
  close(): void
}

/**
 * Creates an in-memory DuckDB instance with `threads` and `memory_limit` set, and one connection.
 * Throws a RangeError when `threads` is not a positive integer (a caller bug, not a data problem).
 */
export async function openDuckDb(options: DuckDbOptions): Promise<DuckDbSession> {
  if (!Number.isInteger(options.threads) || options.threads < 1) {
    throw new RangeError(`threads must be a positive integer, got ${options.threads}`)
  }
  const config: Record<string, string> = {
    threads: String(options.threads),
    autoinstall_known_extensions: 'false',
    autoload_known_extensions: 'false',
    // DuckDB keeps the bytes it reads from files for later queries of the session. A run reads each file once
    // or twice, and across 10,000 small partials files that cache held ~150 MB (one new file over the
    // 10,000-file ledger bench: 557 MB peak and 3.4-3.7 s with it, 413-421 MB and 2.8-3.0 s without).
    enable_external_file_cache: 'false',
  }
  if (options.memoryLimit !== undefined) config.memory_limit = options.memoryLimit
  if (options.tempDirectory !== undefined) config.temp_directory = options.tempDirectory
  const instance = await DuckDBInstance.create(':memory:', config)
  let connection: DuckDBConnection
  try {
    connection = await instance.connect()
    await connection.run("SET TimeZone = 'UTC'")
    if (options.trackProgress === true) {
      // the estimate without DuckDB's own bar on the terminal
      await connection.run('SET enable_progress_bar = true')
      await connection.run('SET enable_progress_bar_print = false')
    }
  } catch (err) {
    instance.closeSync()
    throw err
  }
  let closed = false
  const extra: DuckDBConnection[] = []
  return {
    connection,
    run: (sql) => connection.run(sql),
    interrupt: () => {
      if (closed) return
      connection.interrupt()
      for (const c of extra) c.interrupt()
    },
    progress: () => {
      if (closed) return null
      const percent = connection.progress.percentage
      return percent >= 0 ? Math.min(1, percent / 100) : null
    },
    connect: async () => {
      if (closed) throw new Error('the DuckDB session is closed')
      const c = await instance.connect()
      extra.push(c)
      await c.run("SET TimeZone = 'UTC'")
      return c
    },
    close: () => {
      if (closed) return
      closed = true
      for (const c of extra) c.closeSync()
      connection.closeSync()
      instance.closeSync()
    },
  }
}

/** Opens a session, runs `fn` with it, and always closes it. */
export async function withDuckDb<T>(options: DuckDbOptions, fn: (db: DuckDbSession) => Promise<T>): Promise<T> {
  const db = await openDuckDb(options)
  try {
    return await fn(db)
  } finally {
    db.close()
  }
}
