/**
 * A compact form of a `Discovery` for posting from the discovery worker to the main thread
 * (discover-thread.ts). The structured clone of 10,000 file objects cost ~70 ms of main-thread time;
 * this form is a handful of strings and typed arrays (the arrays' buffers are transferred, not copied)
 * and is rebuilt in ~10 ms. Hive records are sent once per distinct folder record. Pure.
 */
import type { FileKind, SourceFile } from '../types.js'
import type { Discovery } from './discover.js'

/** The wire form: column `i` of every array describes file `i`. */
export interface DiscoveryWire {
  /** Paths joined by NUL, which no path can contain. */
  readonly paths: string
  readonly size: Float64Array
  readonly mtimeMs: Float64Array
  /** Index into `kinds`. */
  readonly kind: Uint8Array
  readonly kinds: readonly FileKind[]
  /** Index into `hives`. */
  readonly hive: Uint32Array
  /** JSON of the distinct Hive records, in first-use order. */
  readonly hives: string
  readonly ignored: Discovery['ignored']
}

/** Encodes `d`; pass `transferList(wire)` to `postMessage` so the typed arrays move without a copy. */
export function encodeDiscovery(d: Discovery): DiscoveryWire {
  const n = d.files.length
  const size = new Float64Array(n)
  const mtimeMs = new Float64Array(n)
  const kind = new Uint8Array(n)
  const hive = new Uint32Array(n)
  const kinds: FileKind[] = []
  const hives: Readonly<Record<string, string>>[] = []
  const kindIndex = new Map<FileKind, number>()
  const hiveIndex = new Map<Readonly<Record<string, string>>, number>()
  const paths: string[] = new Array(n)
  for (let i = 0; i < n; i++) {
    const f = d.files[i] as SourceFile
    paths[i] = f.path
    size[i] = f.size
    mtimeMs[i] = f.mtimeMs
    kind[i] = indexOf(f.kind, kindIndex, kinds)
    hive[i] = indexOf(f.hive, hiveIndex, hives)
  }
  return {
    paths: paths.join('\u0000'),
    size,
    mtimeMs,
    kind,
    kinds,
    hive,
    hives: JSON.stringify(hives),
    ignored: d.ignored,
  }
}

/** Position of `value` in `list` (by identity), appending it on first sight. */
function indexOf<T>(value: T, index: Map<T, number>, list: T[]): number {
  let i = index.get(value)
  if (i === undefined) {
    i = list.length
    index.set(value, i)
    list.push(value)
  }
  return i
}

/** The buffers of `wire` to transfer with it. */
export function transferList(wire: DiscoveryWire): ArrayBuffer[] {
  return [wire.size.buffer, wire.mtimeMs.buffer, wire.kind.buffer, wire.hive.buffer] as ArrayBuffer[]
}

/** Rebuilds the `Discovery` that `encodeDiscovery` was given (files sharing a Hive record share it again). */
export function decodeDiscovery(wire: DiscoveryWire): Discovery {
  const n = wire.size.length
  const paths = n === 0 ? [] : wire.paths.split('\u0000')
  if (paths.length !== n) throw new Error(`discovery wire form holds ${paths.length} paths for ${n} files`)
  const hives = JSON.parse(wire.hives) as Readonly<Record<string, string>>[]
  const files: SourceFile[] = new Array(n)
  for (let i = 0; i < n; i++) {
    files[i] = {
      path: paths[i] as string,
      kind: wire.kinds[wire.kind[i] as number] as FileKind,
      size: wire.size[i] as number,
      mtimeMs: wire.mtimeMs[i] as number,
      hive: hives[wire.hive[i] as number] as Readonly<Record<string, string>>,
    }
  }
  return { files, ignored: wire.ignored }
}
