/**
 * Columnar hand-off of rows to DuckDB for the Parquet writers (write.ts, store/partials.ts).
 *
 * Why: loading row objects into a temp table (an appender, per value or per 2,048-row chunk) cost ~0.85 s for the
 * 24,000 windows of one run (fits + shifts + partials): one native call per string value, a BigInt per count, the
 * temp table's own insert, and the garbage of it all. Here each column is gathered once into a typed array and
 * DuckDB reads the arrays during the COPY itself; no temp table is created.
 *
 * How:
 * - The caller gathers each column into a {@link GatheredColumn}: numbers (counts, epoch ms, doubles) in a
 *   Float64Array, booleans as 0/1, strings as codes into a dictionary of their distinct values, plus a null mask.
 *   {@link gatherColumn} does it for one column with a check per value; the table writers first try the one-pass
 *   gatherer of gather.ts, the partials store has its own loop.
 * - {@link withColumnarRows} registers the table function `slopeshift_columns(source, range)` on the connection
 *   (once) and lends it the columns while `work` runs. DuckDB pulls 2,048 rows per call straight from the arrays, in
 *   the caller's row order and restricted to one range of it (e.g. one partition). Strings travel as INTEGER codes;
 *   the SQL maps them back through the dictionary, given once as `string_split('<joined>', '<separator>')`, which
 *   DuckDB folds to a constant list: no string crosses into DuckDB per row (a VARCHAR vector takes one native call
 *   per value, an ENUM vector re-reads its whole dictionary per chunk). Counts and epoch ms travel as DOUBLE and are
 *   cast back with `CAST(x AS BIGINT)` and `make_timestamptz(CAST(round(x * 1000) AS BIGINT))` (µs since the
 *   epoch, independent of the session TimeZone), so no BigInt is made per value.
 * - A column that holds the same value (or null) in every row is not handed over at all: the SQL gets it as a
 *   literal of its type, computed by the same cast from the same double, so the values are the same.
 *
 * Rows come out of the function in the order given (one scan thread, no ORDER BY needed when the caller sorted).
 * The Parquet bytes are those of the temp-table path for the same rows in the same order: same types, same values
 * (compared file by file against the previous writer when this replaced it: fits, shifts, runs, merges, partials,
 * zstd and snappy, 150,000 rows in two row groups on 4 threads).
 */
import {
  BOOLEAN,
  DOUBLE,
  type DuckDBConnection,
  type DuckDBDataChunk,
  DuckDBTableFunction,
  type DuckDBType,
  DuckDBVector,
  INTEGER,
  VARCHAR,
} from '@duckdb/node-api'
import type { ColumnType } from './columns.js'
import { quoteIdent, quoteLiteral } from './duckdb.js'

/** The values of one column, gathered from rows and checked. */
export interface GatheredColumn {
  /** Published column name. */
  readonly name: string
  /** Published type. */
  readonly type: ColumnType
  /**
   * Value of row i: BIGINT, DOUBLE and TIMESTAMPTZ (epoch ms) as numbers; BOOLEAN as 0 or 1; VARCHAR as an index into
   * `dictionary`. Meaningless where `nulls[i]` is 1.
   */
  readonly data: Float64Array | Uint8Array | Uint32Array
  /** VARCHAR only: the distinct strings, in order of first appearance; empty for other types. */
  readonly dictionary: readonly string[]
  /** 1 where row i is null; null when no row is. */
  readonly nulls: Uint8Array | null
}

/** The first value {@link gatherColumn} refused: its row and the value. */
export interface RejectedValue {
  readonly row: number
  readonly raw: unknown
}

/**
 * Gathers column `name` of `rowCount` rows, the value of row i being `get(i)`: every non-null value must pass
 * `accepts` (e.g. `valueCheck` of columns.ts: a string, a safe integer, …), null passes only when `nullable`.
 * Returns the column, or the first refused value (lowest row). `accepts` must refuse a value of another JS type than
 * the column's (a VARCHAR check is called once per distinct string, not once per row).
 */
export function gatherColumn(
  name: string,
  type: ColumnType,
  nullable: boolean,
  rowCount: number,
  get: (row: number) => unknown,
  accepts: (raw: unknown) => boolean,
): GatheredColumn | RejectedValue {
  let nulls: Uint8Array | null = null
  if (type === 'VARCHAR') {
    const codes = new Uint32Array(rowCount)
    const codeOf = new Map<unknown, number>()
    const dictionary: string[] = []
    for (let i = 0; i < rowCount; i++) {
      const raw = get(i)
      if (raw === null && nullable) {
        nulls ??= new Uint8Array(rowCount)
        nulls[i] = 1
        continue
      }
      let code = codeOf.get(raw)
      if (code === undefined) {
        if (raw === null || !accepts(raw)) return { row: i, raw }
        code = dictionary.length
        codeOf.set(raw, code)
        dictionary.push(raw as string)
      }
      codes[i] = code
    }
    return { name, type, data: codes, dictionary, nulls }
  }
  if (type === 'BOOLEAN') {
    const flags = new Uint8Array(rowCount)
    for (let i = 0; i < rowCount; i++) {
      const raw = get(i)
      if (raw === null && nullable) {
        nulls ??= new Uint8Array(rowCount)
        nulls[i] = 1
      } else if (raw === true) flags[i] = 1
      else if (raw !== false || !accepts(raw)) return { row: i, raw }
    }
    return { name, type, data: flags, dictionary: [], nulls }
  }
  const numbers = new Float64Array(rowCount)
  for (let i = 0; i < rowCount; i++) {
    const raw = get(i)
    if (raw === null && nullable) {
      nulls ??= new Uint8Array(rowCount)
      nulls[i] = 1
    } else if (typeof raw === 'number' && accepts(raw)) numbers[i] = raw
    else return { row: i, raw }
  }
  return { name, type, data: numbers, dictionary: [], nulls }
}

/** Whether {@link gatherColumn} returned a refused value rather than a column. */
export function isRejected(gathered: GatheredColumn | RejectedValue): gathered is RejectedValue {
  return 'row' in gathered
}

/** Columns lent to SQL by {@link withColumnarRows}. */
export interface ColumnarRows {
  /** The columns, in published order; all of length `rowCount`. */
  readonly columns: readonly GatheredColumn[]
  readonly rowCount: number
  /** Row order: position p reads row `order[p]`; null for rows in their own order. */
  readonly order: Uint32Array | null
  /** Ranges [from, to) of positions that one SELECT reads, e.g. one per partition; may be empty (from = to). */
  readonly ranges: readonly (readonly [number, number])[]
}

/**
 * Makes `rows` readable by SQL on `connection` while `work` runs. `select(range)` gives
 * `SELECT <every column, in its published type> FROM slopeshift_columns(…)` over the positions of `ranges[range]`,
 * in order; `work` embeds it, e.g. in `COPY (…) TO …`. The columns are released when `work` settles; the function
 * stays registered for later calls.
 */
export async function withColumnarRows<T>(
  connection: DuckDBConnection,
  rows: ColumnarRows,
  work: (select: (range: number) => string) => Promise<T>,
): Promise<T> {
  registerColumnsFunction(connection)
  const plan = planColumns(rows)
  sourceCounter += 1
  const id = sourceCounter
  sources.set(id, plan)
  const select = (range: number): string => {
    if (rows.ranges[range] === undefined) throw new RangeError(`no range ${range} among ${rows.ranges.length}`)
    return `SELECT ${plan.expressions.join(', ')} FROM ${functionName}(${id}, ${range})`
  }
  try {
    return await work(select)
  } finally {
    sources.delete(id)
  }
}

/** What the table function serves for one {@link withColumnarRows} call. */
interface ColumnsPlan {
  readonly rows: ColumnarRows
  /** The columns DuckDB reads from the arrays (the others are literals). */
  readonly loaded: readonly LoadedColumn[]
  /** One SQL expression per column, in published order, `… AS "name"`. */
  readonly expressions: readonly string[]
}

/** A column the table function serves, and how. */
interface LoadedColumn {
  readonly column: GatheredColumn
  /** DOUBLE for numbers (counts and epoch ms too), BOOLEAN, INTEGER for string codes, VARCHAR for strings. */
  readonly loadType: DuckDBType
  /** VARCHAR column served as dictionary codes (see dictionaryList). */
  readonly asCodes: boolean
}

/** Chooses per column: a literal when it holds one value in every row, else loaded (at least one column is). */
function planColumns(rows: ColumnarRows): ColumnsPlan {
  const literals: (string | null)[] = rows.columns.map((c) => (rows.rowCount > 0 ? literalOf(c) : null))
  if (!literals.includes(null)) literals[0] = null
  const loaded: LoadedColumn[] = []
  const expressions = rows.columns.map((column, i) => {
    const name = quoteIdent(column.name)
    const literal = literals[i]
    if (literal !== null && literal !== undefined) return `${literal} AS ${name}`
    if (column.type !== 'VARCHAR') {
      loaded.push({ column, loadType: column.type === 'BOOLEAN' ? BOOLEAN : DOUBLE, asCodes: false })
      return `${publishedExpr(column.type, name)} AS ${name}`
    }
    const split = dictionaryList(column.dictionary)
    loaded.push({ column, loadType: split === null ? VARCHAR : INTEGER, asCodes: split !== null })
    return split === null ? `${name} AS ${name}` : `list_extract(${split}, ${name} + 1) AS ${name}`
  })
  return { rows, loaded, expressions }
}

/**
 * The SQL list of a VARCHAR column's dictionary, `string_split('<strings joined by a separator>', '<separator>')`,
 * which DuckDB folds to a constant once per statement; null when the dictionary is longer than
 * {@link maxListedStrings}, no separator is free or a string is not plain text (the column is then loaded as
 * strings). Why: a string crosses into a DuckDB vector by one native call per value, and an ENUM vector re-reads its
 * whole dictionary per chunk; codes into a short list cost neither.
 */
function dictionaryList(dictionary: readonly string[]): string | null {
  if (dictionary.length === 0 || dictionary.length > maxListedStrings || !dictionary.every(isPlainText)) return null
  const separator = separators.find((sep) => dictionary.every((text) => !text.includes(sep)))
  if (separator === undefined) return null
  return `string_split(${quoteLiteral(dictionary.join(separator))}, ${quoteLiteral(separator)})`
}

/**
 * Most distinct strings a column may have to travel as codes into a list. The list's cost grows with its length as
 * well as with the rows (DuckDB handles the constant list per chunk): the partials of 1,000,000 series over four
 * windows (4 M rows, a 1 M-string series_id list) took 98 s to write, and the fits and shifts tables 177 s. Measured
 * on 400,000 partials rows, codes against one native call per string: 0.81-0.89 s against 1.02-1.11 s with 4,000
 * distinct strings, even at 16,000 (0.97-1.10 s against 1.02-1.12 s), 1.52-1.62 s against 1.09-1.31 s at 50,000.
 */
const maxListedStrings = 16_384

/** Separators tried for {@link dictionaryList}: control characters that names and messages do not hold. */
const separators = ['\u001f', '\u001e', '\u001d', '\u001c', '\u0001', '\u0002', '\u0003']

/** SQL turning `source` (a loaded column or a DOUBLE literal) into its published type. */
function publishedExpr(type: ColumnType, source: string): string {
  switch (type) {
    case 'BIGINT':
      return `CAST(${source} AS BIGINT)`
    case 'TIMESTAMPTZ':
      // Whole ms round-trip exactly; finer fractions are rounded to the µs (half away from zero).
      return `make_timestamptz(CAST(round(${source} * 1000) AS BIGINT))`
    default:
      return source
  }
}

/** Strings that can be SQL literals as they are: no NUL (a C string ends there) and no UTF-16 surrogate. */
function isPlainText(text: string): boolean {
  return !text.includes('\u0000') && !/[\ud800-\udfff]/.test(text)
}

/**
 * The SQL literal of a column that holds one value (or null) in every row, in its published type, or null when the
 * column has two values or more (or one that is not plain text).
 */
function literalOf(column: GatheredColumn): string | null {
  const { data, nulls } = column
  const n = data.length
  if (nulls !== null) {
    for (let i = 0; i < n; i++) if (nulls[i] === 0) return null
    return `CAST(NULL AS ${column.type})`
  }
  if (column.type === 'VARCHAR') {
    const text = column.dictionary[0]
    return column.dictionary.length === 1 && text !== undefined && isPlainText(text) ? quoteLiteral(text) : null
  }
  const first = data[0] as number
  // `!==` is fast but equates 0 with -0 and never matches NaN: Object.is where those matter.
  if (first !== 0 && !Number.isNaN(first)) {
    for (let i = 1; i < n; i++) if (data[i] !== first) return null
  } else {
    for (let i = 1; i < n; i++) if (!Object.is(data[i], first)) return null
  }
  if (column.type === 'BOOLEAN') return first === 1 ? 'true' : 'false'
  // The shortest text that parses back to the same double; `String(-0)` drops the sign.
  const text = Object.is(first, -0) ? '-0.0' : String(first)
  return publishedExpr(column.type, `CAST('${text}' AS DOUBLE)`)
}

const functionName = 'slopeshift_columns'
/** Column sources by id, while their {@link withColumnarRows} call runs. Process-wide: any connection may read. */
const sources = new Map<number, ColumnsPlan>()
let sourceCounter = 0
/**
 * Connections the function is registered on (a registration is per database; repeating it replaces it), each with
 * its function object, held as long as the connection so that its callbacks stay reachable.
 */
const registered = new WeakMap<DuckDBConnection, DuckDBTableFunction>()

/** What bind hands to init and to each call. */
interface Bound {
  readonly plan: ColumnsPlan
  readonly from: number
  readonly to: number
}

function registerColumnsFunction(connection: DuckDBConnection): void {
  if (registered.has(connection)) return
  const tableFunction = DuckDBTableFunction.create({
    name: functionName,
    parameterTypes: [INTEGER, INTEGER],
    bindFunction: (info) => {
      const plan = sources.get(Number(info.getParameter(0)))
      const range = plan?.rows.ranges[Number(info.getParameter(1))]
      if (plan === undefined || range === undefined) {
        info.setError(`${functionName}: no such source or range (it is only readable inside withColumnarRows)`)
        return
      }
      for (const { column, loadType } of plan.loaded) info.addResultColumn(column.name, loadType)
      const bound: Bound = { plan, from: range[0], to: range[1] }
      info.setBindData(bound)
      info.setCardinality(range[1] - range[0], true)
    },
    initFunction: (info) => {
      info.setMaxThreads(1)
      info.setInitData({ next: (info.bindData as Bound).from })
    },
    mainFunction: (info, output) => {
      const bound = info.bindData as Bound
      const state = info.initData as { next: number }
      const count = Math.min(vectorSize, bound.to - state.next)
      output.rowCount = count
      if (count <= 0) return
      try {
        fillChunk(output, bound.plan, state.next, count)
      } catch (err) {
        info.setError(`${functionName}: ${err instanceof Error ? err.message : String(err)}`)
        return
      }
      state.next += count
    },
  })
  connection.registerTableFunction(tableFunction)
  registered.set(connection, tableFunction)
}

/** Rows per call: DuckDB's vector size. */
const vectorSize = DuckDBVector.standardSize()

/** Copies positions [start, start + count) of every loaded column into the output chunk. */
function fillChunk(output: DuckDBDataChunk, plan: ColumnsPlan, start: number, count: number): void {
  const order = plan.rows.order
  for (let k = 0; k < plan.loaded.length; k++) {
    const { column, asCodes } = plan.loaded[k] as LoadedColumn
    const { type, data, dictionary, nulls } = column
    const vector = output.getColumnVector(k)
    // Values first, nulls after: a vector without nulls sets no validity bits per value.
    if (type === 'BOOLEAN') {
      for (let i = 0; i < count; i++) {
        vector.setItem(i, data[order === null ? start + i : (order[start + i] as number)] === 1)
      }
    } else if (type === 'VARCHAR' && !asCodes) {
      for (let i = 0; i < count; i++) {
        vector.setItem(i, dictionary[data[order === null ? start + i : (order[start + i] as number)] as number] ?? null)
      }
    } else {
      const items = itemsOf(vector, asCodes, count)
      if (items !== null && order === null) items.set(data.subarray(start, start + count))
      else if (items !== null) for (let i = 0; i < count; i++) items[i] = data[order?.[start + i] as number] as number
      else
        for (let i = 0; i < count; i++)
          vector.setItem(i, data[order === null ? start + i : (order[start + i] as number)] as number)
    }
    if (nulls !== null) {
      for (let i = 0; i < count; i++) {
        if (nulls[order === null ? start + i : (order[start + i] as number)] === 1) vector.setItem(i, null)
      }
    }
    vector.flush()
  }
}

/**
 * The typed array in which a DOUBLE or INTEGER vector of @duckdb/node-api keeps its values until `flush()` copies
 * them into DuckDB, or null when the vector has none of that kind and length (the caller then uses `setItem`). Why:
 * `setItem` per value is a call and a validity check each, and runs on cold JIT in a CLI process; a bulk `set` is a
 * copy. The field is not public API, hence the check of its type and length before any use.
 */
function itemsOf(vector: DuckDBVector, codes: boolean, count: number): Float64Array | Int32Array | null {
  const items = (vector as unknown as { readonly items?: unknown }).items
  const fits = codes ? items instanceof Int32Array : items instanceof Float64Array
  return fits && (items as Float64Array | Int32Array).length === count ? (items as Float64Array | Int32Array) : null
}

/**
 * Compares two strings the way DuckDB orders VARCHAR (by UTF-8 bytes, i.e. by code point): like `<` on UTF-16 code
 * units, except that surrogates (code points above U+FFFF) sort after U+E000–U+FFFF.
 */
export function compareUtf8(a: string, b: string): number {
  const n = Math.min(a.length, b.length)
  for (let i = 0; i < n; i++) {
    const x = a.charCodeAt(i)
    const y = b.charCodeAt(i)
    if (x !== y) return codePointRank(x) - codePointRank(y)
  }
  return a.length - b.length
}

function codePointRank(unit: number): number {
  if (unit < 0xd800) return unit
  return unit >= 0xe000 ? unit - 0x800 : unit + 0x2000
}
