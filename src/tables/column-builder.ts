/**
 * Column-wise rows for the table writers: a stage that computes many rows (fit-rows.ts: one per series and window)
 * sets each value straight into the typed arrays of its column instead of building a row object, and hands the
 * columns to the writer as {@link GatheredRows}, which checks them as it checks row objects.
 *
 * Why: a row object of the fits table holds ~30 doubles, each a heap number of its own, and the writer then gathers
 * them into typed arrays again. For 400,000 windows building the objects took ~1.1 s and gathering them ~0.5 s of a
 * 13 s run, besides the collections of their garbage; the objects were ~0.7 KB of heap each.
 */
import type { SeriesKey } from '../types.js'
import type { GatheredColumn } from './columnar.js'
import { type ColumnSpec, type TableName, type TableRows, tableColumns } from './columns.js'

/** Rows gathered into the published columns of a table, in order, with each row's key for error messages. */
export interface GatheredRows {
  readonly columns: readonly GatheredColumn[]
  readonly rowCount: number
  readonly keyOf: (row: number) => SeriesKey | null
}

/** What a column builder needs of its column: the published name and type. */
type ColumnName = Pick<ColumnSpec, 'name' | 'type'>

/** A number column (BIGINT, DOUBLE, TIMESTAMPTZ as epoch ms). */
export class NumberColumn {
  private readonly data: Float64Array
  private nulls: Uint8Array | null = null
  constructor(
    private readonly spec: ColumnName,
    capacity: number,
  ) {
    this.data = new Float64Array(capacity)
  }
  set(row: number, value: number | null): void {
    if (value === null) this.setNull(row)
    else this.data[row] = value
  }
  private setNull(row: number): void {
    this.nulls ??= new Uint8Array(this.data.length)
    this.nulls[row] = 1
  }
  build(rowCount: number): GatheredColumn {
    return gathered(this.spec, this.data.subarray(0, rowCount), [], this.nulls?.subarray(0, rowCount) ?? null)
  }
}

/** A VARCHAR column: codes into the distinct strings, in order of first appearance. */
export class TextColumn {
  private readonly codes: Uint32Array
  private readonly dictionary: string[] = []
  private readonly codeOf = new Map<string, number>()
  private nulls: Uint8Array | null = null
  // Neighbouring rows mostly repeat a string (a series' windows, one state, one run id).
  private last: string | null = null
  private lastCode = 0
  constructor(
    private readonly spec: ColumnName,
    capacity: number,
  ) {
    this.codes = new Uint32Array(capacity)
  }
  set(row: number, value: string | null): void {
    if (value === null) {
      this.nulls ??= new Uint8Array(this.codes.length)
      this.nulls[row] = 1
      return
    }
    if (value !== this.last) {
      let code = this.codeOf.get(value)
      if (code === undefined) {
        code = this.dictionary.length
        this.codeOf.set(value, code)
        this.dictionary.push(value)
      }
      this.last = value
      this.lastCode = code
    }
    this.codes[row] = this.lastCode
  }
  build(rowCount: number): GatheredColumn {
    return gathered(
      this.spec,
      this.codes.subarray(0, rowCount),
      this.dictionary,
      this.nulls?.subarray(0, rowCount) ?? null,
    )
  }
}

/** A BOOLEAN column. */
export class FlagColumn {
  private readonly data: Uint8Array
  constructor(
    private readonly spec: ColumnName,
    capacity: number,
  ) {
    this.data = new Uint8Array(capacity)
  }
  set(row: number, value: boolean): void {
    this.data[row] = value ? 1 : 0
  }
  build(rowCount: number): GatheredColumn {
    return gathered(this.spec, this.data.subarray(0, rowCount), [], null)
  }
}

function gathered(
  spec: ColumnName,
  data: GatheredColumn['data'],
  dictionary: readonly string[],
  nulls: Uint8Array | null,
): GatheredColumn {
  return { name: spec.name, type: spec.type, data, dictionary, nulls }
}

/** The column of a row field of TypeScript type `T`. */
type ColumnFor<T> = [NonNullable<T>] extends [number]
  ? NumberColumn
  : [NonNullable<T>] extends [string]
    ? TextColumn
    : FlagColumn

/** One column per field of a table's rows (the key columns apart). */
export type FieldColumns<Row> = { readonly [K in Exclude<keyof Row, 'key'>]: ColumnFor<Row[K]> }

/** The columns of up to `capacity` rows of `table`: `fields` by name, `keys` by position, then `build`. */
export interface TableColumns<T extends TableName> {
  readonly fields: FieldColumns<TableRows[T]>
  readonly keys: readonly TextColumn[]
  /** The first `rowCount` rows, with the key of each row for messages. */
  build(rowCount: number, keyOf: (row: number) => SeriesKey | null): GatheredRows
}

export function tableColumnsOf<T extends TableName>(
  table: T,
  keyColumns: readonly string[],
  capacity: number,
): TableColumns<T> {
  const specs = tableColumns(table, keyColumns)
  const keys: TextColumn[] = []
  const fields: Record<string, NumberColumn | TextColumn | FlagColumn> = {}
  const ordered = specs.map((spec) => {
    if (spec.role === 'key') {
      const column = new TextColumn(spec, capacity)
      keys.push(column)
      return column
    }
    // The spec's types fit the row type's fields (columns.ts checks it at compile time), hence the cast below.
    const column =
      spec.type === 'VARCHAR'
        ? new TextColumn(spec, capacity)
        : spec.type === 'BOOLEAN'
          ? new FlagColumn(spec, capacity)
          : new NumberColumn(spec, capacity)
    fields[spec.name] = column
    return column
  })
  return {
    fields: fields as unknown as FieldColumns<TableRows[T]>,
    keys,
    build: (rowCount, keyOf) => ({ columns: ordered.map((c) => c.build(rowCount)), rowCount, keyOf }),
  }
}
