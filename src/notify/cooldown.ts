/**
 * Cooldown: which shifts are worth a notice. A (series, window) that was notified (or folded) once
 * is never notified again, and a shift in the same direction as the series' last notified shift
 * within `cooldownWindows` windows of it is folded into that notice (design.md "Decide").
 *
 * State lives in `<root>/_state/notified.json`, replaced atomically. {@link filterByCooldown} is pure
 * and returns the next state; the caller saves it after the notices are in the outbox, so a crash in
 * between re-queues the same digest id (which `enqueue` recognises) instead of losing a notice.
 */
import { readFile } from 'node:fs/promises'
import { join } from 'node:path'
import { z } from 'zod'
import { IoError } from '../errors.js'
import { type WindowSpec, windowEndOf } from '../kernel/window.js'
import { type ShiftRow, seriesId } from '../types.js'
import { writeFileAtomic } from './atomic-file.js'

/** Direction of a slope change: sign of `delta` (slope − baseline slope). */
export type ShiftDirection = 'up' | 'down'

/** What is remembered per series. */
export interface SeriesCooldown {
  /** Window starts (epoch ms, ascending) already notified or folded for this series. */
  readonly windows: readonly number[]
  /** The last notified shift: its direction and window start; null when none had a direction. */
  readonly last: { readonly direction: ShiftDirection; readonly windowStart: number } | null
}

/** Content of `notified.json`, keyed by `seriesId(key)`. */
export interface CooldownState {
  readonly version: 1
  readonly series: Readonly<Record<string, SeriesCooldown>>
}

/** Why a shift is not notified. */
export type HoldReason = 'already-notified' | 'folded'

/** Result of {@link filterByCooldown}. */
export interface CooldownResult {
  /** Shift rows to put in the digest, in input order. */
  readonly notify: readonly ShiftRow[]
  /** Shift rows held back, with the reason. */
  readonly held: readonly { readonly row: ShiftRow; readonly reason: HoldReason }[]
  /** State to save once the digest is in the outbox. */
  readonly next: CooldownState
}

const stateSchema = z
  .object({
    version: z.literal(1),
    series: z.record(
      z.string(),
      z
        .object({
          windows: z.array(z.number()),
          last: z
            .object({ direction: z.enum(['up', 'down']), windowStart: z.number() })
            .strict()
            .nullable(),
        })
        .strict(),
    ),
  })
  .strict()

/** A state with nothing notified yet. */
export function emptyCooldownState(): CooldownState {
  return { version: 1, series: {} }
}

/** Path of the cooldown state file. */
export function cooldownStatePath(root: string): string {
  return join(root, '_state', 'notified.json')
}

/**
 * Splits the `shift` rows of a run into those to notify and those held back. Rows are considered
 * per series in window order, so within one run a later same-direction window is folded into an
 * earlier one. Folding is measured from the last *notified* window (a folded one does not extend
 * the cooldown), so a steadily accelerating series is re-notified every `cooldownWindows + 1`
 * windows rather than never. `cooldownWindows = 0` folds nothing. Rows with another verdict are ignored.
 */
export function filterByCooldown(
  state: CooldownState,
  rows: readonly ShiftRow[],
  cooldownWindows: number,
  window: WindowSpec,
): CooldownResult {
  const series: Record<string, SeriesCooldown> = { ...state.series }
  const decisions = new Map<ShiftRow, HoldReason | 'notify'>()
  const ordered = rows
    .filter((r) => r.verdict === 'shift')
    .map((row) => ({ row, id: seriesId(row.key) }))
    .sort((a, b) => (a.id < b.id ? -1 : a.id > b.id ? 1 : a.row.window_start - b.row.window_start))

  for (const { row, id } of ordered) {
    const current = series[id] ?? { windows: [], last: null }
    if (current.windows.includes(row.window_start)) {
      decisions.set(row, 'already-notified')
      continue
    }
    const direction = directionOf(row)
    const last = current.last
    const windows = [...current.windows, row.window_start].sort((a, b) => a - b)
    if (
      direction !== null &&
      last !== null &&
      last.direction === direction &&
      row.window_start > last.windowStart &&
      windowsBetween(window, last.windowStart, row.window_start, cooldownWindows + 1) <= cooldownWindows
    ) {
      decisions.set(row, 'folded')
      series[id] = { windows, last }
      continue
    }
    decisions.set(row, 'notify')
    const newer = last === null || row.window_start >= last.windowStart
    series[id] = {
      windows,
      last: direction !== null && newer ? { direction, windowStart: row.window_start } : last,
    }
  }

  const notify: ShiftRow[] = []
  const held: { row: ShiftRow; reason: HoldReason }[] = []
  for (const row of rows) {
    const d = decisions.get(row)
    if (d === undefined) continue
    if (d === 'notify') notify.push(row)
    else held.push({ row, reason: d })
  }
  return { notify, held, next: { version: 1, series } }
}

/** Direction of a shift row: sign of delta (or of slope − baseline slope); null when zero or unknown. */
export function directionOf(row: ShiftRow): ShiftDirection | null {
  const delta = row.delta ?? (row.slope !== null && row.baseline_slope !== null ? row.slope - row.baseline_slope : null)
  if (delta === null || !Number.isFinite(delta) || delta === 0) return null
  return delta > 0 ? 'up' : 'down'
}

/**
 * Number of window steps from the window starting at `fromStartMs` to the one starting at
 * `toStartMs` (1 = adjacent). Calendar windows are stepped one by one, at most `cap` steps; the
 * result is then `cap` when the gap is at least that large.
 */
export function windowsBetween(window: WindowSpec, fromStartMs: number, toStartMs: number, cap: number): number {
  if (toStartMs <= fromStartMs) return 0
  if (window.kind === 'fixed') return Math.min(cap, Math.round((toStartMs - fromStartMs) / window.sizeMs))
  let steps = 0
  let t = fromStartMs
  while (t < toStartMs && steps < cap) {
    t = windowEndOf(window, t)
    steps += 1
  }
  return steps
}

/** Reads `notified.json`; a missing file is an empty state. Throws IoError naming the file when it is corrupt. */
export async function loadCooldownState(root: string): Promise<CooldownState> {
  const file = cooldownStatePath(root)
  let text: string
  try {
    text = await readFile(file, 'utf8')
  } catch (err) {
    if (err instanceof Error && (err as Error & { code?: unknown }).code === 'ENOENT') return emptyCooldownState()
    throw new IoError(`could not read cooldown state ${file}; check permissions of the output root`, {
      context: { file },
      cause: err,
    })
  }
  let value: unknown
  try {
    value = JSON.parse(text)
  } catch (err) {
    throw corrupt(file, err)
  }
  const parsed = stateSchema.safeParse(value)
  if (!parsed.success) throw corrupt(file, parsed.error)
  return parsed.data
}

/** Replaces `notified.json` atomically. */
export async function saveCooldownState(root: string, state: CooldownState): Promise<void> {
  await writeFileAtomic(cooldownStatePath(root), `${JSON.stringify(state)}\n`)
}

function corrupt(file: string, cause: unknown): IoError {
  return new IoError(
    `cooldown state ${file} is not valid; move it aside to start cooldown afresh (series may be notified again)`,
    { context: { file }, cause },
  )
}
