/**
 * Early discovery: the CLI entry (cli/launch.ts) starts listing a `run`'s inputs in the discovery worker
 * before the CLI bundle has even loaded, from a quick read of the config file (parse and `${ENV}`
 * interpolation only, no schema). Listing 10,000 partition folders takes ~0.3 s, which then overlaps
 * the CLI's own start instead of following it.
 *
 * It is a guess, and is used only when it is right: the run command compares the inputs and options the
 * worker used with those of the validated config (`takeEarlyDiscovery`), and discovers again when they
 * differ, when the guess could not be made (e.g. an unset variable, a config error the validator will
 * report) or when the early listing failed (the fresh one then reports the error).
 */
import path from 'node:path'
import { Worker } from 'node:worker_threads'
import type { DiscoverOptions, Discovery } from './discover.js'
import type { DiscoverReply } from './discover-worker.js'
import { decodeDiscovery } from './discovery-wire.js'

/** What discovery is given: input paths and options, absolute and resolved as the validated config has them. */
export interface DiscoveryInputs {
  readonly inputs: readonly string[]
  readonly options: DiscoverOptions
}

/** True when two discovery requests would list the same files. */
export function sameDiscoveryInputs(a: DiscoveryInputs, b: DiscoveryInputs): boolean {
  const exA = a.options.exclude ?? []
  const exB = b.options.exclude ?? []
  return (
    a.inputs.length === b.inputs.length &&
    a.inputs.every((p, i) => p === b.inputs[i]) &&
    (a.options.format ?? 'auto') === (b.options.format ?? 'auto') &&
    exA.length === exB.length &&
    exA.every((p, i) => p === exB[i])
  )
}

/** The early listing in flight, handed from the entry to the run command through the global object. */
interface EarlyListing {
  readonly configFile: string
  readonly reply: Promise<DiscoverReply | null>
  /** Stops the worker (its listing is not wanted). */
  readonly stop: () => void
}

const key = Symbol.for('slopeshift.earlyDiscovery')
type Holder = { [key]?: EarlyListing | undefined }

/**
 * Called by the CLI entry with its arguments: when they run `run --config F`, starts the discovery worker
 * (`workerScript`) on F's guessed inputs. Never throws; without a worker nothing happens.
 */
export function startEarlyDiscovery(argv: readonly string[], workerScript: string): void {
  if (argv[0] !== 'run') return
  let config: string | undefined
  for (let i = 1; i < argv.length; i++) {
    const a = argv[i] as string
    if (a === '--config') config = argv[i + 1]
    else if (a.startsWith('--config=')) config = a.slice('--config='.length)
  }
  if (config === undefined || config === '') return
  const configFile = path.resolve(config)
  let worker: Worker | undefined
  const reply = new Promise<DiscoverReply | null>((resolve) => {
    try {
      worker = new Worker(workerScript, { workerData: { configFile } })
      worker.once('message', (r: DiscoverReply) => resolve(r))
      worker.once('error', () => resolve(null))
      worker.once('exit', () => resolve(null))
    } catch {
      resolve(null)
    }
  })
  const stop = (): void => {
    worker?.terminate().catch(() => undefined)
  }
  ;(globalThis as Holder)[key] = { configFile, reply, stop }
}

/**
 * The early listing for `configFile` when the entry started one, as a promise of its result if it
 * listed exactly `expected`, else of null (then discover as usual). Takes it: a second call gets null.
 */
export function takeEarlyDiscovery(configFile: string, expected: DiscoveryInputs): Promise<Discovery | null> | null {
  const holder = globalThis as Holder
  const early = holder[key]
  holder[key] = undefined
  if (early === undefined) return null
  if (early.configFile !== path.resolve(configFile)) {
    early.stop()
    return null
  }
  return early.reply.then((r) =>
    r?.ok && r.request !== undefined && sameDiscoveryInputs(r.request, expected) ? decodeDiscovery(r.discovery) : null,
  )
}

/** Stops an early listing nobody took (a command that failed before its run started). */
export function dropEarlyDiscovery(): void {
  const holder = globalThis as Holder
  holder[key]?.stop()
  holder[key] = undefined
}
