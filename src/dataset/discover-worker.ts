/**
 * Worker-thread entry of `discoverInWorker` (discover-thread.ts): runs `discoverFiles` on the inputs it
 * is given and posts back the result in its compact wire form (discovery-wire.ts), or the error as
 * plain data (class name, message, context) for the caller to rebuild. Nothing else: no logger, no config.
 */
import { parentPort, workerData } from 'node:worker_threads'
import { SlopeshiftError } from '../errors.js'
import { type DiscoverOptions, discoverFiles } from './discover.js'
import { type DiscoveryWire, encodeDiscovery, transferList } from './discovery-wire.js'

/** What the caller sends (`workerData`). */
export interface DiscoverRequest {
  readonly inputs: readonly string[]
  readonly options: DiscoverOptions
}

/** What the worker posts back. */
export type DiscoverReply =
  | { readonly ok: true; readonly discovery: DiscoveryWire }
  | {
      readonly ok: false
      readonly name: string
      readonly message: string
      readonly context: Readonly<Record<string, unknown>>
    }

const request = workerData as DiscoverRequest
let reply: DiscoverReply
try {
  reply = { ok: true, discovery: encodeDiscovery(await discoverFiles(request.inputs, request.options)) }
} catch (err) {
  reply = {
    ok: false,
    name: err instanceof Error ? err.name : 'Error',
    message: err instanceof Error ? err.message : String(err),
    context: err instanceof SlopeshiftError ? { ...err.context } : {},
  }
}
parentPort?.postMessage(reply, reply.ok ? transferList(reply.discovery) : [])
