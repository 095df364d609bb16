/** Builds the reader plan from the config. Pure. */
import type { Config } from '../config/schema.js'
import type { DiscoverOptions } from '../dataset/discover.js'
import { parseWindow, type WindowSpec } from '../kernel/window.js'
import type { MomentsPlan } from '../types.js'

/** The window spec of a validated config (validation guarantees it parses). */
export function windowSpecOf(config: Config): WindowSpec {
  const spec = parseWindow(config.window.size, config.window.timeZone)
  if (spec === null) throw new TypeError(`window.size ${config.window.size} passed validation but does not parse`)
  return spec
}

/** What the readers need: columns, window, x unit, and whether to keep the lag block. */
export function momentsPlanOf(config: Config): MomentsPlan {
  const w = config.source.weight
  return {
    keys: config.source.keys,
    x: { column: config.source.x.column, epochUnit: config.source.x.epochUnit },
    y: { column: config.source.y.column },
    weight: w === undefined ? null : { column: w.column, kind: w.kind },
    window: windowSpecOf(config),
    xUnit: config.window.xUnit,
    // §1.5: the serial adjustment is not defined for weighted fits.
    trackLag: w === undefined && config.detect.serial !== 'off',
  }
}

/** Human-readable baseline description for the `baseline` column. */
export function baselineLabel(config: Config): string {
  const k = config.detect.baselineWindows
  if (k === 1) return 'previous window'
  return `${k} previous windows, ${config.detect.baselineKind === 'merged-line' ? 'merged line' : 'common slope'}`
}

/** How a run discovers its input files: the configured format, never inside the output root. */
export function discoverOptionsOf(config: {
  readonly source: Pick<Config['source'], 'format'>
  readonly output: Pick<Config['output'], 'root'>
}): DiscoverOptions {
  return { format: config.source.format, exclude: [config.output.root] }
}
