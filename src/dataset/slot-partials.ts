/**
 * The end of a kernel read (Arrow IPC files, and Parquet rows streamed for the lag block): turns the
 * slots of one file into its partial moments, checked finite, in the readers' deterministic order.
 */
import { basename } from 'node:path'
import { DataError } from '../errors.js'
import { type MomentSlots, slotClearlyValid, slotMoments } from '../kernel/accumulate.js'
import { invalidMomentsReason } from '../kernel/moments.js'
import type { SlotIndex } from '../kernel/slot-index.js'
import type { WindowCursor } from '../kernel/window-x.js'
import { type PartialMoments, type SeriesKey, seriesId } from '../types.js'

/**
 * Partial moments of every (series, window) slot of `file`, sorted by series id (`seriesId(key)`)
 * then window start. `seriesKeys[s]` is the key of series id `s` of `index`. Releases the slots'
 * arrays to the buffer pool: the store must not be used afterwards.
 *
 * @throws DataError naming the file, series and window when a slot's moments are not finite
 *   (values beyond about ±1e154 overflow the sums of squares).
 */
export function slotPartials(
  file: string,
  slots: MomentSlots,
  index: SlotIndex,
  cursor: WindowCursor,
  seriesKeys: readonly SeriesKey[],
): PartialMoments[] {
  const ids = seriesKeys.map((key) => seriesId(key))
  const seriesRank = ranks(ids.length, (a, b) => {
    const ia = ids[a] as string
    const ib = ids[b] as string
    return ia < ib ? -1 : ia > ib ? 1 : 0
  })
  const starts = cursor.windowStartMs
  const windowRank = ranks(starts.length, (a, b) => (starts[a] as number) - (starts[b] as number))
  const order = index.slotOrder(seriesRank, windowRank)
  const out: PartialMoments[] = new Array(order.length)
  for (let i = 0; i < order.length; i++) {
    const k = order[i] as number
    const sid = index.seriesOfSlot[k] as number
    const key = seriesKeys[sid] as SeriesKey
    const windowStartMs = starts[index.windowOfSlot[k] as number] as number
    const moments = slotMoments(slots, k)
    const reason = slotClearlyValid(slots, k) ? null : invalidMomentsReason(moments)
    if (reason !== null) {
      const id = ids[sid] as string
      throw new DataError(
        `moments of series ${id} in window ${new Date(windowStartMs).toISOString()} from ${basename(file)} are not valid (${reason}); check the file for values beyond ±1e154`,
        { context: { file, key: id } },
      )
    }
    out[i] = { file, key, windowStartMs, moments }
  }
  slots.release()
  return out
}

/** rank[i] = position of item i when items 0 … count − 1 are sorted by `compare`. */
function ranks(count: number, compare: (a: number, b: number) => number): Int32Array {
  const order = Array.from({ length: count }, (_, i) => i).sort(compare)
  const rank = new Int32Array(count)
  order.forEach((item, r) => {
    rank[item] = r
  })
  return rank
}
