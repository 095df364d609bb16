/**
 * `discoverFiles` in a worker thread, so that listing a large lake (10,000 partition folders: one
 * `readdir` and one `stat` each, about 0.3 s of system calls on a small VM) runs while the main thread
 * loads the engines and reads the ledger. The result is the same as `discoverFiles` in this thread;
 * errors come back as the same classes (NoInputError, DataError) with the same messages.
 *
 * Falls back to discovering in this thread when the worker script is not next to this module (running
 * from TypeScript sources) or the worker cannot start.
 */
import { existsSync } from 'node:fs'
import { fileURLToPath } from 'node:url'
import { Worker } from 'node:worker_threads'
import { DataError, type ErrorContext, NoInputError } from '../errors.js'
import { type DiscoverOptions, type Discovery, discoverFiles } from './discover.js'
import type { DiscoverReply, DiscoverRequest } from './discover-worker.js'
import { decodeDiscovery } from './discovery-wire.js'

/**
 * Where the built worker script is: beside this module in `dist/dataset/`, or one folder up when this
 * module is a chunk of the CLI bundle (`dist/bundle/chunks/` → `dist/bundle/discover-worker.js`).
 */
export function discoverWorkerScript(): string | null {
  for (const rel of ['./discover-worker.js', '../discover-worker.js']) {
    const file = fileURLToPath(new URL(rel, import.meta.url))
    if (existsSync(file)) return file
  }
  return null
}

/** Discovers `inputs` like `discoverFiles`, in a worker thread when the built worker script is there. */
export function discoverInWorker(inputs: readonly string[], options: DiscoverOptions = {}): Promise<Discovery> {
  const script = discoverWorkerScript()
  if (script === null) return discoverFiles(inputs, options)
  const request: DiscoverRequest = { inputs, options }
  return new Promise<Discovery>((resolve, reject) => {
    let settled = false
    let worker: Worker
    try {
      worker = new Worker(script, { workerData: request })
    } catch {
      resolve(discoverFiles(inputs, options))
      return
    }
    worker.once('message', (reply: DiscoverReply) => {
      settled = true
      if (reply.ok) resolve(decodeDiscovery(reply.discovery))
      else reject(rebuild(reply))
    })
    worker.once('error', () => {
      // The worker itself failed (not a discovery error): do the work here instead.
      if (!settled) {
        settled = true
        resolve(discoverFiles(inputs, options))
      }
    })
    worker.once('exit', () => {
      if (!settled) {
        settled = true
        resolve(discoverFiles(inputs, options))
      }
    })
  })
}

function rebuild(reply: Extract<DiscoverReply, { ok: false }>): Error {
  const context = reply.context as ErrorContext
  if (reply.name === 'NoInputError') return new NoInputError(reply.message, { context })
  if (reply.name === 'DataError') return new DataError(reply.message, { context })
  const err = new Error(reply.message)
  err.name = reply.name
  return err
}
