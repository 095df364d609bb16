/**
 * Column specs of the published tables `fits/`, `shifts/` and `runs/` (design.md "Output tables"): the single
 * source for the Parquet writers, the readers and the JSON Schemas in `schemas/`. A spec is checked against the row
 * type of src/types.ts at compile time: every field appears exactly once, with a column type and nullability that fit
 * the field's TypeScript type.
 */
import { ConfigError } from '../errors.js'
import type { FitRow, RunRow, ShiftRow } from '../types.js'

/** DuckDB column types used by the tables; `TIMESTAMPTZ` lands in Parquet as TIMESTAMP_MICROS, adjusted to UTC. */
export type ColumnType = 'VARCHAR' | 'BIGINT' | 'DOUBLE' | 'BOOLEAN' | 'TIMESTAMPTZ'

/** The type name DuckDB's DESCRIBE prints for a column type (`TIMESTAMPTZ` → `TIMESTAMP WITH TIME ZONE`). */
export function duckdbTypeName(type: ColumnType): string {
  return type === 'TIMESTAMPTZ' ? 'TIMESTAMP WITH TIME ZONE' : type
}

/** One published column. */
export interface ColumnSpec {
  /** Published column name (snake_case; key columns keep their configured names). */
  readonly name: string
  readonly type: ColumnType
  /** Whether the column may hold SQL NULL. */
  readonly nullable: boolean
  /** One sentence for analysts: meaning and unit. */
  readonly description: string
  /** The closed set of values of a VARCHAR column, when there is one. */
  readonly values?: readonly string[]
  /** `key` for the configured series key columns, `field` for every fixed column. */
  readonly role: 'key' | 'field'
}

/** Column types a row field of TypeScript type `T` may be stored as. */
type TypeFor<T> = [NonNullable<T>] extends [number]
  ? 'BIGINT' | 'DOUBLE' | 'TIMESTAMPTZ'
  : [NonNullable<T>] extends [string]
    ? 'VARCHAR'
    : [NonNullable<T>] extends [boolean]
      ? 'BOOLEAN'
      : never

/** Definition of the column that stores a row field of type `T`; nullable exactly when `T` admits null. */
interface FieldDef<T> {
  readonly type: TypeFor<T>
  readonly nullable: null extends T ? true : false
  readonly description: string
  readonly values?: readonly Extract<NonNullable<T>, string>[]
}

/** Every field of a row type except `key`, in published column order. */
type FieldDefs<Row> = { readonly [K in Exclude<keyof Row, 'key'>]: FieldDef<Row[K]> }

const fitFields: FieldDefs<FitRow> = {
  window_start: { type: 'TIMESTAMPTZ', nullable: false, description: 'Window start (inclusive), UTC instant.' },
  window_end: { type: 'TIMESTAMPTZ', nullable: false, description: 'Window end (exclusive), UTC instant.' },
  window_state: {
    type: 'VARCHAR',
    nullable: false,
    values: ['open', 'closed'],
    description: '`closed` once window_end is at or before the watermark; open windows get fits but no verdict.',
  },
  x_unit: {
    type: 'VARCHAR',
    nullable: false,
    values: ['ms', 's', 'minute', 'hour', 'day', 'week'],
    description: 'Unit of x: x is the time since window_start in this unit; slopes are per this unit.',
  },
  n: { type: 'BIGINT', nullable: false, description: 'Accepted points in the window.' },
  w_sum: { type: 'DOUBLE', nullable: false, description: 'Sum of weights (equals n when unweighted).' },
  x_mean: { type: 'DOUBLE', nullable: false, description: 'Weighted mean of x, in x_unit from window_start.' },
  y_mean: { type: 'DOUBLE', nullable: false, description: 'Weighted mean of y, in the metric unit.' },
  sxx: { type: 'DOUBLE', nullable: false, description: 'Centred sum of squares of x (statistics.md §1.1).' },
  syy: { type: 'DOUBLE', nullable: false, description: 'Centred sum of squares of y (statistics.md §1.1).' },
  sxy: {
    type: 'DOUBLE',
    nullable: false,
    description: 'Centred sum of cross products of x and y (statistics.md §1.1).',
  },
  x_min: { type: 'DOUBLE', nullable: false, description: 'Smallest accepted x, in x_unit from window_start.' },
  x_max: { type: 'DOUBLE', nullable: false, description: 'Largest accepted x, in x_unit from window_start.' },
  intercept: {
    type: 'DOUBLE',
    nullable: true,
    description: 'Fitted line value at window_start (statistics.md §2.1); null when the slope is undefined.',
  },
  slope: { type: 'DOUBLE', nullable: true, description: 'Least-squares slope per x_unit; null when x has no spread.' },
  slope_se: { type: 'DOUBLE', nullable: true, description: 'Standard error of the slope (statistics.md §2.1).' },
  intercept_se: {
    type: 'DOUBLE',
    nullable: true,
    description: 'Standard error of the intercept (statistics.md §2.1).',
  },
  r2: { type: 'DOUBLE', nullable: true, description: 'Coefficient of determination R².' },
  resid_sd: { type: 'DOUBLE', nullable: true, description: 'Residual standard deviation, in the metric unit.' },
  exact_fit: {
    type: 'BOOLEAN',
    nullable: false,
    description: 'True when the points lie on a line to rounding precision (statistics.md §2.2).',
  },
  r1: { type: 'DOUBLE', nullable: true, description: 'Lag-1 residual autocorrelation (statistics.md §5.3).' },
  durbin_watson: { type: 'DOUBLE', nullable: true, description: 'Durbin–Watson statistic (statistics.md §5.3).' },
  points_skipped: {
    type: 'BIGINT',
    nullable: false,
    description: 'Rows of this series and window skipped for null or non-finite x, y or weight.',
  },
  proj_at: {
    type: 'TIMESTAMPTZ',
    nullable: true,
    description: 'Instant of the projection: one window span past window_end (statistics.md §2.3, §6).',
  },
  proj_value: { type: 'DOUBLE', nullable: true, description: 'Line value at proj_at.' },
  proj_ci_low: { type: 'DOUBLE', nullable: true, description: 'Lower 95% confidence limit of the line at proj_at.' },
  proj_ci_high: { type: 'DOUBLE', nullable: true, description: 'Upper 95% confidence limit of the line at proj_at.' },
  proj_pi_low: {
    type: 'DOUBLE',
    nullable: true,
    description: 'Lower 95% prediction limit of a new observation at proj_at.',
  },
  proj_pi_high: {
    type: 'DOUBLE',
    nullable: true,
    description: 'Upper 95% prediction limit of a new observation at proj_at.',
  },
  limit_value: { type: 'DOUBLE', nullable: true, description: 'Configured level the line is checked against.' },
  limit_at: {
    type: 'TIMESTAMPTZ',
    nullable: true,
    description: 'When the fitted line reaches limit_value (statistics.md §6.2).',
  },
  limit_at_low: { type: 'TIMESTAMPTZ', nullable: true, description: 'Earliest limit_at of the Fieller interval.' },
  limit_at_high: { type: 'TIMESTAMPTZ', nullable: true, description: 'Latest limit_at of the Fieller interval.' },
  limit_note: {
    type: 'VARCHAR',
    nullable: true,
    description: 'Why no crossing is reported, or `extrapolated` (statistics.md §6.1).',
  },
  run_id: { type: 'VARCHAR', nullable: false, description: 'Id of the run that computed this row.' },
  computed_at: { type: 'TIMESTAMPTZ', nullable: false, description: 'When this row was computed, UTC instant.' },
}

const shiftFields: FieldDefs<ShiftRow> = {
  window_start: { type: 'TIMESTAMPTZ', nullable: false, description: 'Start (inclusive) of the tested window.' },
  window_end: { type: 'TIMESTAMPTZ', nullable: false, description: 'End (exclusive) of the tested window.' },
  x_unit: {
    type: 'VARCHAR',
    nullable: false,
    values: ['ms', 's', 'minute', 'hour', 'day', 'week'],
    description: 'Unit of x; slopes and deltas are per this unit.',
  },
  baseline: {
    type: 'VARCHAR',
    nullable: false,
    description: 'What the window is compared against, in words (e.g. `previous window`).',
  },
  baseline_start: {
    type: 'TIMESTAMPTZ',
    nullable: true,
    description: 'Start of the earliest baseline window; null when there is no baseline.',
  },
  slope: { type: 'DOUBLE', nullable: true, description: 'Slope of the tested window per x_unit.' },
  baseline_slope: { type: 'DOUBLE', nullable: true, description: 'Slope of the baseline per x_unit.' },
  delta: { type: 'DOUBLE', nullable: true, description: 'slope − baseline_slope (statistics.md §3).' },
  delta_se: { type: 'DOUBLE', nullable: true, description: 'Standard error of delta (statistics.md §3).' },
  ratio: { type: 'DOUBLE', nullable: true, description: 'slope / baseline_slope; null when baseline_slope is 0.' },
  statistic: { type: 'DOUBLE', nullable: true, description: 'Test statistic (t, or F for the Chow test).' },
  df: { type: 'DOUBLE', nullable: true, description: 'Degrees of freedom of the test (real-valued for Welch).' },
  p_value: { type: 'DOUBLE', nullable: true, description: 'Two-sided p-value of the shift test.' },
  q_value: {
    type: 'DOUBLE',
    nullable: true,
    description: 'Benjamini–Hochberg adjusted p-value across the series of this window (statistics.md §4.2).',
  },
  verdict: {
    type: 'VARCHAR',
    nullable: false,
    values: ['shift', 'steady', 'thin', 'flat'],
    description: 'Decision for this series and window (design.md).',
  },
  reason: { type: 'VARCHAR', nullable: false, description: 'The rule that decided the verdict, in words.' },
  test: {
    type: 'VARCHAR',
    nullable: false,
    description: 'Test used: `welch_ar1`, `welch`, `pooled` or `chow` (statistics.md §3, §5.4).',
  },
  serial: {
    type: 'VARCHAR',
    nullable: false,
    values: ['adjusted', 'fallback', 'unavailable', 'off'],
    description: 'How serial correlation entered the test (statistics.md §4.3, §5.6).',
  },
  n_eff_new: { type: 'DOUBLE', nullable: true, description: 'Effective sample size of the tested window (§5.4).' },
  n_eff_base: { type: 'DOUBLE', nullable: true, description: 'Effective sample size of the baseline (§5.4).' },
  run_id: { type: 'VARCHAR', nullable: false, description: 'Id of the run that computed this row.' },
}

const runFields: FieldDefs<RunRow> = {
  run_id: { type: 'VARCHAR', nullable: false, description: 'Run id.' },
  job: { type: 'VARCHAR', nullable: false, description: 'Job name from the config.' },
  started_at: { type: 'TIMESTAMPTZ', nullable: false, description: 'When the run started, UTC instant.' },
  ended_at: { type: 'TIMESTAMPTZ', nullable: false, description: 'When the run ended, UTC instant.' },
  status: {
    type: 'VARCHAR',
    nullable: false,
    values: ['ok', 'failed', 'stopped'],
    description: 'How the run ended.',
  },
  error: { type: 'VARCHAR', nullable: true, description: 'Error message of a failed run; null otherwise.' },
  files_new: { type: 'BIGINT', nullable: false, description: 'Input files seen for the first time.' },
  files_changed: { type: 'BIGINT', nullable: false, description: 'Input files rewritten since the last run.' },
  files_deleted: { type: 'BIGINT', nullable: false, description: 'Input files gone since the last run.' },
  files_skipped: { type: 'BIGINT', nullable: false, description: 'Input files unchanged and not read.' },
  files_read: { type: 'BIGINT', nullable: false, description: 'Input files read in this run.' },
  rows_read: { type: 'BIGINT', nullable: false, description: 'Input rows read (accepted + skipped).' },
  rows_skipped: { type: 'BIGINT', nullable: false, description: 'Input rows skipped for null or non-finite values.' },
  series: { type: 'BIGINT', nullable: false, description: 'Distinct series touched by the run.' },
  windows: { type: 'BIGINT', nullable: false, description: 'Series windows fitted in this run.' },
  windows_remerged: { type: 'BIGINT', nullable: false, description: 'Series windows re-merged from partials.' },
  shifts: { type: 'BIGINT', nullable: false, description: 'Rows with verdict `shift` written in this run.' },
  notices_sent: { type: 'BIGINT', nullable: false, description: 'Notices delivered to webhooks in this run.' },
  notices_pending: { type: 'BIGINT', nullable: false, description: 'Notices left in the outbox for a later run.' },
}

/** The published tables and their row types. */
export interface TableRows {
  readonly fits: FitRow
  readonly shifts: ShiftRow
  readonly runs: RunRow
}

/** Name of a published table; also its folder name under `output.root`. */
export type TableName = keyof TableRows

/** Every table name, in a fixed order. */
export const tableNames: readonly TableName[] = ['fits', 'shifts', 'runs']

/** How a table is laid out on disk and which columns identify a row. */
export interface TableSpec {
  readonly name: TableName
  /** One sentence describing a row. */
  readonly description: string
  /** Whether the configured key columns come first in the table (fits, shifts) or not at all (runs). */
  readonly hasKey: boolean
  /** The fixed columns, in published order (key columns not included). */
  readonly fields: readonly ColumnSpec[]
  /** Hive partition folder `<partitionColumn>=YYYY-MM-DD`, the UTC date of `partitionSource`. */
  readonly partitionColumn: 'window_date' | 'run_date'
  /** The TIMESTAMPTZ column whose UTC date names the partition. */
  readonly partitionSource: 'window_start' | 'started_at'
  /** Fixed columns that, after the key columns (when hasKey), identify a row: no two rows share them. */
  readonly identity: readonly string[]
  /** Fixed columns that, after the key columns (when hasKey), order the rows of a partition file. */
  readonly order: readonly string[]
}

function fieldsOf<Row>(defs: FieldDefs<Row>): readonly ColumnSpec[] {
  return Object.entries<FieldDef<unknown>>(defs as Record<string, FieldDef<unknown>>).map(([name, def]) => ({
    name,
    type: def.type as ColumnType,
    nullable: def.nullable,
    description: def.description,
    ...(def.values === undefined ? {} : { values: def.values as readonly string[] }),
    role: 'field' as const,
  }))
}

/** Specs of the three tables (design.md "Output tables"). */
export const tableSpecs: Readonly<Record<TableName, TableSpec>> = {
  fits: {
    name: 'fits',
    description: 'One least-squares fit per series per window.',
    hasKey: true,
    fields: fieldsOf(fitFields),
    partitionColumn: 'window_date',
    partitionSource: 'window_start',
    identity: ['window_start'],
    order: ['window_start'],
  },
  shifts: {
    name: 'shifts',
    description: 'One slope-shift test per tested series per window.',
    hasKey: true,
    fields: fieldsOf(shiftFields),
    partitionColumn: 'window_date',
    partitionSource: 'window_start',
    identity: ['window_start'],
    order: ['window_start'],
  },
  runs: {
    name: 'runs',
    description: 'One row per run.',
    hasKey: false,
    fields: fieldsOf(runFields),
    partitionColumn: 'run_date',
    partitionSource: 'started_at',
    identity: ['run_id'],
    order: ['started_at', 'run_id'],
  },
}

/** Description of every key column, used in schemas and in {@link tableColumns}. */
export const keyColumnDescription =
  'Series key: one VARCHAR column per configured key column (config source.keys), named as configured, in config ' +
  'order, placed before the fixed columns; null when the input value was null.'

/**
 * All columns of `table` in published order: the configured key columns first (fits, shifts; VARCHAR, nullable),
 * then the fixed columns. Throws a ConfigError when a key column name is empty, repeated, or collides with a fixed
 * column or the partition column, since the table could not hold it.
 */
export function tableColumns(table: TableName, keyColumns: readonly string[]): readonly ColumnSpec[] {
  const spec = tableSpecs[table]
  if (!spec.hasKey) return spec.fields
  const taken = new Set([...spec.fields.map((c) => c.name), spec.partitionColumn])
  const seen = new Set<string>()
  for (const name of keyColumns) {
    if (name.length === 0) throw new ConfigError('a key column name is empty; set source.keys to non-empty names')
    if (seen.has(name)) throw new ConfigError(`key column "${name}" is listed twice in source.keys; list it once`)
    if (taken.has(name)) {
      throw new ConfigError(
        `key column "${name}" has the name of a ${table} table column; rename it in source.keys (e.g. via a SQL view)`,
        { context: { column: name } },
      )
    }
    seen.add(name)
  }
  const keys = keyColumns.map(
    (name): ColumnSpec => ({ name, type: 'VARCHAR', nullable: true, description: keyColumnDescription, role: 'key' }),
  )
  return [...keys, ...spec.fields]
}

/** Columns that identify a row of `table` (key columns first): a table never holds two rows with equal identity. */
export function identityColumns(table: TableName, keyColumns: readonly string[]): readonly string[] {
  const spec = tableSpecs[table]
  return spec.hasKey ? [...keyColumns, ...spec.identity] : spec.identity
}

/** Columns that order the rows of a partition file of `table` (key columns first); it includes the identity, so the order is total. */
export function orderColumns(table: TableName, keyColumns: readonly string[]): readonly string[] {
  const spec = tableSpecs[table]
  return spec.hasKey ? [...keyColumns, ...spec.order] : spec.order
}

/** Largest epoch ms that a JS Date (and the partition name) can represent: ±8.64e15 ms. */
const maxDateMs = 8.64e15

/**
 * Hive partition folder name of an instant, `<column>=YYYY-MM-DD` with the UTC date, e.g. `window_date=2026-03-01`.
 * Returns null when the instant is not finite or outside years 0000–9999 (no 4-digit date names it).
 */
export function partitionName(table: TableName, epochMs: number): string | null {
  if (!Number.isFinite(epochMs) || Math.abs(epochMs) > maxDateMs) return null
  const date = new Date(epochMs).toISOString().slice(0, 10)
  if (!/^\d{4}-\d{2}-\d{2}$/.test(date)) return null
  return `${tableSpecs[table].partitionColumn}=${date}`
}

/**
 * The check a non-null value of `column` must pass, in row form (counts and epoch ms as numbers), chosen once
 * per column: VARCHAR a string (one of `values` when set), BIGINT a safe integer, DOUBLE a number, BOOLEAN a
 * boolean, TIMESTAMPTZ epoch ms within the JS Date range. Shared by the writer and the reader.
 */
export function valueCheck(column: ColumnSpec): (raw: unknown) => boolean {
  const allowed = column.values
  switch (column.type) {
    case 'VARCHAR':
      return allowed === undefined
        ? (raw) => typeof raw === 'string'
        : (raw) => typeof raw === 'string' && allowed.includes(raw)
    case 'BIGINT':
      return (raw) => typeof raw === 'number' && Number.isSafeInteger(raw)
    case 'DOUBLE':
      return (raw) => typeof raw === 'number'
    case 'BOOLEAN':
      return (raw) => typeof raw === 'boolean'
    case 'TIMESTAMPTZ':
      return (raw) => typeof raw === 'number' && Math.abs(raw) <= maxDateMs
  }
}

/** File name of the one file in every partition folder: fixed, so rewrites replace it and reruns match. */
export const partitionFileName = 'part-0.parquet'
