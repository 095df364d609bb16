/**
 * The demo dataset, an invented scenario: a fleet of refrigerated storage sites where every
 * compressor unit reports its power draw (kW) every 5 minutes. Most units drift slowly; a few
 * start drawing more and more power part-way through (a failing valve, frosting coils), which
 * is the trend change slopeshift should report. Deterministic for a given seed.
 */
import { normalRng, uniformRng } from './random.js'

export interface FleetOptions {
  /** First sample, epoch ms (default 2026-11-17T00:00Z). */
  readonly startMs?: number
  readonly days?: number
  readonly sites?: number
  readonly unitsPerSite?: number
  readonly stepMs?: number
  readonly seed?: number
}

/** A unit whose trend bends, and how: the slope (kW per hour) before and after `bendMs`. */
export interface Bend {
  readonly site: string
  readonly unit: string
  readonly bendMs: number
  readonly slopeBefore: number
  readonly slopeAfter: number
}

export interface FleetRow {
  readonly site: string
  readonly unit: string
  /** Epoch ms; null for a malformed row. */
  readonly ts: number | null
  /** kW; null or NaN for malformed rows. */
  readonly power_kw: number | null
}

export const defaultFleet = {
  startMs: Date.UTC(2026, 10, 17),
  days: 14,
  sites: 6,
  unitsPerSite: 8,
  stepMs: 5 * 60_000,
  seed: 20261201,
} as const

/** The units that bend in the demo (same for every seed): site, unit, day of the bend, slopes. */
export function fleetBends(options: FleetOptions = {}): Bend[] {
  const o = { ...defaultFleet, ...options }
  const day = 86_400_000
  return [
    { site: 'site-02', unit: 'c3', bendMs: o.startMs + 9 * day, slopeBefore: 0.002, slopeAfter: 0.045 },
    { site: 'site-04', unit: 'c1', bendMs: o.startMs + 7 * day, slopeBefore: 0.001, slopeAfter: 0.06 },
    { site: 'site-05', unit: 'c6', bendMs: o.startMs + 11 * day, slopeBefore: 0.003, slopeAfter: -0.05 },
  ].filter((b) => Number(b.site.slice(5)) <= o.sites && Number(b.unit.slice(1)) <= o.unitsPerSite)
}

/**
 * Generates the fleet's rows in time order per unit, unit after unit. About 0.3% of rows are
 * malformed (null power, NaN power, null timestamp) so the demo shows the skip counters.
 */
export function* fleetRows(options: FleetOptions = {}): Generator<FleetRow> {
  const o = { ...defaultFleet, ...options }
  const bends = fleetBends(o)
  const noise = normalRng(o.seed)
  const u = uniformRng(o.seed ^ 0x5bd1e995)
  const perDay = 86_400_000 / o.stepMs
  const steps = o.days * perDay
  for (let s = 1; s <= o.sites; s++) {
    for (let c = 1; c <= o.unitsPerSite; c++) {
      const site = `site-${String(s).padStart(2, '0')}`
      const unit = `c${c}`
      const bend = bends.find((b) => b.site === site && b.unit === unit)
      const base = 3 + 4 * u()
      const drift = (u() - 0.5) * 0.004 // kW per hour, slow and steady
      const sd = 0.15 + 0.2 * u()
      let ar = 0
      for (let i = 0; i < steps; i++) {
        const ts = o.startMs + i * o.stepMs
        const hours = (ts - o.startMs) / 3_600_000
        let level = base + (bend ? bend.slopeBefore : drift) * hours
        if (bend && ts >= bend.bendMs) level += (bend.slopeAfter - bend.slopeBefore) * ((ts - bend.bendMs) / 3_600_000)
        ar = 0.3 * ar + noise() * sd
        const r = u()
        if (r < 0.001) yield { site, unit, ts, power_kw: null }
        else if (r < 0.002) yield { site, unit, ts, power_kw: Number.NaN }
        else if (r < 0.0025) yield { site, unit, ts: null, power_kw: level + ar }
        else yield { site, unit, ts, power_kw: Math.round((level + ar) * 1000) / 1000 }
      }
    }
  }
}
