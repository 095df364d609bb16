/**
 * DuckDB plumbing shared by the table writers and readers: borrowing a caller's connection or opening a short-lived
 * in-memory instance, and quoting SQL identifiers and literals.
 */
import { type DuckDBConnection, DuckDBInstance } from '@duckdb/node-api'

/**
 * Runs `work` on `connection` when given (the caller keeps owning it), else on a fresh in-memory DuckDB instance
 * that is closed afterwards, also when `work` throws. A short-lived instance costs a few milliseconds; pass the
 * run's connection when writing many tables.
 */
export async function withConnection<T>(
  connection: DuckDBConnection | undefined,
  work: (connection: DuckDBConnection) => Promise<T>,
): Promise<T> {
  if (connection !== undefined) return work(connection)
  const instance = await DuckDBInstance.create(':memory:')
  try {
    const own = await instance.connect()
    try {
      return await work(own)
    } finally {
      own.closeSync()
    }
  } finally {
    instance.closeSync()
  }
}

/** Quotes an SQL identifier (column or table name) for DuckDB: `"name"`, with `"` doubled. */
export function quoteIdent(name: string): string {
  return `"${name.replaceAll('"', '""')}"`
}

/** Quotes an SQL string literal (e.g. a file path) for DuckDB: `'text'`, with `'` doubled. */
export function quoteLiteral(text: string): string {
  return `'${text.replaceAll("'", "''")}'`
}

let tempTableCounter = 0

/** A temp table name unique within this process, so concurrent writers can share one connection. */
export function uniqueTempTableName(prefix: string): string {
  tempTableCounter += 1
  return `${prefix}_${process.pid}_${tempTableCounter}`
}
