/**
 * Young-generation collections on request. A Parquet row stream (parquet-rows.ts) fetches thousands of
 * DuckDB chunks whose native memory is freed only when V8 collects their small JavaScript wrappers; left
 * to V8's own pace that happens late, and on the bench the read held ~100 MB more. A young-generation
 * collection every few dozen chunks costs well under a millisecond each.
 *
 * V8 offers the collection only with its `--expose-gc` flag, set here at run time. A V8 code cache records
 * the flags it was made under and is refused under others, so the CLI entry (launch.ts) sets the flag
 * before it compiles its cached bundle: the cache is then made and checked under the same flags.
 */
import v8 from 'node:v8'
import vm from 'node:vm'

let exposed = false
let collector: (() => void) | null = null

/** Sets V8's `--expose-gc` (once); a flag change only: nothing is collected and no global is added. */
export function exposeGc(): void {
  if (exposed) return
  exposed = true
  try {
    v8.setFlagsFromString('--expose-gc')
  } catch {
    // a runtime without the flag: youngCollector falls back to a no-op
  }
}

/**
 * A function that runs one young-generation collection, or does nothing where V8 offers none (memory then
 * returns at V8's own pace; results never depend on it).
 */
export function youngCollector(): () => void {
  if (collector !== null) return collector
  collector = () => undefined
  exposeGc()
  try {
    const gc: unknown = vm.runInNewContext('gc')
    if (typeof gc === 'function') collector = () => gc({ type: 'minor' })
  } catch {
    // keep the no-op
  }
  return collector
}
