/**
 * Worker-thread entry of `discoverInWorker` (discover-thread.ts) and of early discovery
 * (early-discovery.ts): runs `discoverFiles` on the inputs it is given, or on those it guesses from a
 * config file, and posts back the result in its compact wire form (discovery-wire.ts) with the inputs it
 * used, or the error as plain data (class name, message, context) for the caller to rebuild. Nothing
 * else: no logger, no schema.
 */
import { parentPort, workerData } from 'node:worker_threads'
import { SlopeshiftError } from '../errors.js'
import { type DiscoverOptions, discoverFiles } from './discover.js'
import { guessFromConfigFile } from './discovery-guess.js'
import { type DiscoveryWire, encodeDiscovery, transferList } from './discovery-wire.js'
import type { DiscoveryInputs } from './early-discovery.js'

/** What the caller sends (`workerData`): the inputs, or a config file to guess them from. */
export type DiscoverRequest =
  | { readonly inputs: readonly string[]; readonly options: DiscoverOptions }
  | { readonly configFile: string }

/** What the worker posts back. `request` is what it listed; absent when a config gave no guess. */
export type DiscoverReply =
  | { readonly ok: true; readonly discovery: DiscoveryWire; readonly request?: DiscoveryInputs }
  | {
      readonly ok: false
      readonly name: string
      readonly message: string
      readonly context: Readonly<Record<string, unknown>>
    }

const request = workerData as DiscoverRequest
let reply: DiscoverReply
try {
  const inputs = 'configFile' in request ? await guessFromConfigFile(request.configFile, process.env) : request
  reply =
    inputs === null
      ? { ok: false, name: 'NoGuess', message: 'the config names no plain inputs', context: {} }
      : { ok: true, discovery: encodeDiscovery(await discoverFiles(inputs.inputs, inputs.options)), request: inputs }
} catch (err) {
  reply = {
    ok: false,
    name: err instanceof Error ? err.name : 'Error',
    message: err instanceof Error ? err.message : String(err),
    context: err instanceof SlopeshiftError ? { ...err.context } : {},
  }
}
parentPort?.postMessage(reply, reply.ok ? transferList(reply.discovery) : [])
