/**
 * Shared data shapes that cross stage boundaries. Table rows use the published column names of
 * design.md (snake_case); in-memory shapes use camelCase.
 */
import type { Moments } from './kernel/moments.js'

/** Values of the key columns of one series, in config order; stored as text (null stays null). */
export type SeriesKey = readonly (string | null)[]

/** Canonical, order-preserving id of a series key (used for maps, sorting and file names). */
export function seriesId(key: SeriesKey): string {
  return JSON.stringify(key)
}

/** What kind of input a file is. */
export type FileKind = 'parquet' | 'arrow-file' | 'arrow-stream'

/** One input file found by discovery. */
export interface SourceFile {
  /** Absolute path. */
  readonly path: string
  readonly kind: FileKind
  readonly size: number
  readonly mtimeMs: number
  /** Hive `name=value` folder segments on the path, outermost first. */
  readonly hive: Readonly<Record<string, string>>
}

/** Partial moments of one (input file, series, window). */
export interface PartialMoments {
  /** Absolute path of the file the rows came from. */
  readonly file: string
  readonly key: SeriesKey
  /** Window start, epoch ms. */
  readonly windowStartMs: number
  readonly moments: Moments
}

/** Counters a reader reports for one file. */
export interface ReadStats {
  readonly file: string
  /** Rows seen in the file (accepted + skipped). */
  rows: number
  /** Rows rejected by validation (null/non-finite x, y or weight). */
  skipped: number
}

/** Series keys and windows merged from all partials: the input of fitting and testing. */
export interface WindowState {
  readonly key: SeriesKey
  readonly windowStartMs: number
  readonly windowEndMs: number
  readonly moments: Moments
}
