/**
 * Time windows: half-open `[start, end)` intervals in epoch milliseconds. Fixed sizes are aligned
 * to the Unix epoch (00:00 UTC); calendar windows (`day`, `isoweek`, `month`) follow the wall
 * clock of a time zone, so a DST day lasts 23 or 25 hours (statistics.md §0). Pure.
 */

/** How x is measured inside a window, and what slopes are "per". */
export type XUnit = 'ms' | 's' | 'minute' | 'hour' | 'day' | 'week'

/** Milliseconds per x unit. */
export const msPerXUnit: Readonly<Record<XUnit, number>> = {
  ms: 1,
  s: 1000,
  minute: 60_000,
  hour: 3_600_000,
  day: 86_400_000,
  week: 604_800_000,
}

export type CalendarUnit = 'day' | 'isoweek' | 'month'

export type WindowSpec =
  | { readonly kind: 'fixed'; readonly sizeMs: number; readonly label: string }
  | { readonly kind: 'calendar'; readonly unit: CalendarUnit; readonly timeZone: string; readonly label: string }

const fixedPattern = /^([1-9][0-9]*)(s|m|h|d|w)$/
const fixedUnitMs: Readonly<Record<string, number>> = {
  s: 1000,
  m: 60_000,
  h: 3_600_000,
  d: 86_400_000,
  w: 604_800_000,
}

/**
 * Parses a window size: `15m`, `6h`, `1d`, `7d`, `2w` (fixed) or `day`, `isoweek`, `month` (calendar
 * in `timeZone`). Returns null when the text is not a window size.
 */
export function parseWindow(size: string, timeZone = 'UTC'): WindowSpec | null {
  if (size === 'day' || size === 'isoweek' || size === 'month') {
    return { kind: 'calendar', unit: size, timeZone, label: size }
  }
  const m = fixedPattern.exec(size)
  if (m === null) return null
  const unitMs = fixedUnitMs[m[2] ?? '']
  if (unitMs === undefined) return null
  return { kind: 'fixed', sizeMs: Number(m[1]) * unitMs, label: size }
}

/** True when `timeZone` is a zone name the runtime knows. */
export function isValidTimeZone(timeZone: string): boolean {
  // Every runtime knows UTC (the default); answering without Intl spares each start loading the time
  // zone data (5-50 ms), which fixed-size windows in UTC never need.
  if (timeZone === 'UTC') return true
  try {
    new Intl.DateTimeFormat('en-US', { timeZone })
    return true
  } catch {
    return false
  }
}

/** Start (epoch ms) of the window holding instant `tMs`. */
export function windowStartOf(spec: WindowSpec, tMs: number): number {
  if (spec.kind === 'fixed') return Math.floor(tMs / spec.sizeMs) * spec.sizeMs
  const p = localParts(spec.timeZone, tMs)
  let y = p.year
  let mo = p.month
  let d = p.day
  if (spec.unit === 'month') d = 1
  else if (spec.unit === 'isoweek') {
    const weekday = (new Date(Date.UTC(y, mo - 1, d)).getUTCDay() + 6) % 7 // Monday = 0
    const monday = new Date(Date.UTC(y, mo - 1, d - weekday))
    y = monday.getUTCFullYear()
    mo = monday.getUTCMonth() + 1
    d = monday.getUTCDate()
  }
  return localMidnightToUtc(spec.timeZone, y, mo, d)
}

/** End (epoch ms, exclusive) of the window that starts at `startMs`. */
export function windowEndOf(spec: WindowSpec, startMs: number): number {
  if (spec.kind === 'fixed') return startMs + spec.sizeMs
  const p = localParts(spec.timeZone, startMs)
  const next =
    spec.unit === 'day'
      ? new Date(Date.UTC(p.year, p.month - 1, p.day + 1))
      : spec.unit === 'isoweek'
        ? new Date(Date.UTC(p.year, p.month - 1, p.day + 7))
        : new Date(Date.UTC(p.year, p.month, 1))
  return localMidnightToUtc(spec.timeZone, next.getUTCFullYear(), next.getUTCMonth() + 1, next.getUTCDate())
}

/** Start of the window before the one starting at `startMs`. */
export function previousWindowStart(spec: WindowSpec, startMs: number): number {
  if (spec.kind === 'fixed') return startMs - spec.sizeMs
  return windowStartOf(spec, startMs - 1)
}

interface LocalParts {
  year: number
  month: number
  day: number
  hour: number
  minute: number
  second: number
}

const formatters = new Map<string, Intl.DateTimeFormat>()

function formatterFor(timeZone: string): Intl.DateTimeFormat {
  let f = formatters.get(timeZone)
  if (f === undefined) {
    f = new Intl.DateTimeFormat('en-US', {
      timeZone,
      hourCycle: 'h23',
      year: 'numeric',
      month: 'numeric',
      day: 'numeric',
      hour: 'numeric',
      minute: 'numeric',
      second: 'numeric',
    })
    formatters.set(timeZone, f)
  }
  return f
}

function localParts(timeZone: string, tMs: number): LocalParts {
  const out: LocalParts = { year: 0, month: 0, day: 0, hour: 0, minute: 0, second: 0 }
  for (const part of formatterFor(timeZone).formatToParts(new Date(tMs))) {
    if (part.type in out) out[part.type as keyof LocalParts] = Number(part.value)
  }
  return out
}

/** Offset (ms) of local wall time from UTC at instant tMs. */
function zoneOffsetMs(timeZone: string, tMs: number): number {
  const p = localParts(timeZone, tMs)
  const wall = Date.UTC(p.year, p.month - 1, p.day, p.hour, p.minute, p.second)
  return wall - (tMs - (((tMs % 1000) + 1000) % 1000))
}

/** The UTC instant of local 00:00 on the given date (or the first instant after it, across a DST gap). */
function localMidnightToUtc(timeZone: string, year: number, month: number, day: number): number {
  const wall = Date.UTC(year, month - 1, day)
  let t = wall - zoneOffsetMs(timeZone, wall)
  t = wall - zoneOffsetMs(timeZone, t)
  // In a DST gap at midnight (e.g. America/Havana, America/Santiago) 00:00 does not exist and t reads
  // as the previous evening: move it to the end of the gap, the first instant of the requested date.
  const seen = t + zoneOffsetMs(timeZone, t)
  if (seen < wall) t += wall - seen
  return t
}
