/** The moments plan of the invented power-draw feeds that the lag-block reader tests write. */
import type { WindowSpec } from '../../src/kernel/window.js'
import type { MomentsPlan } from '../../src/types.js'

/** x `ts` (epochs in `epochUnit`), y `power_kw`, x in minutes, the lag block kept, no weights. */
export function powerDrawPlan(
  window: WindowSpec,
  keys: readonly string[],
  epochUnit: MomentsPlan['x']['epochUnit'] = 'ms',
): MomentsPlan {
  return {
    keys,
    x: { column: 'ts', epochUnit },
    y: { column: 'power_kw' },
    weight: null,
    window,
    xUnit: 'minute',
    trackLag: true,
  }
}
