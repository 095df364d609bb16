/**
 * The ledger: which input files the published tables were computed from (design.md "Words we use",
 * "Publish"). Two files under `<root>/_state/`:
 *
 * - `ledger.json`, small: the committed run id, the run-level facts, and the name of the entries file.
 *   Replacing it by an atomic rename is THE commit point of a run: before the rename completes, the
 *   previous ledger (and so the previous run's view of the inputs) is in force; after it, the new one is.
 * - `entries-<hash>.json`: one entry per consumed input file, as columns, named by the SHA-256 of its
 *   bytes and never changed once written. A run whose entries equal the committed ones (a no-op rerun)
 *   commits by rewriting only the small file: over 10,000 files that skips ~3 MB of JSON each run.
 *
 * Version 1 ledgers (entries inline in `ledger.json`) are still read; the next commit writes version 2.
 */
import { createHash } from 'node:crypto'
import { open, readdir, readFile, rename, unlink } from 'node:fs/promises'
import { join } from 'node:path'
import { z } from 'zod'
import { CantCreateError, DataError, IoError } from '../errors.js'
import type { LedgerEntry } from '../plan/files.js'
import { comparePaths } from '../plan/files.js'
import { ensureDir, fsyncDir, hasCode, stateDir } from './paths.js'

export type { LedgerEntry } from '../plan/files.js'

/** Format version `commitLedger` writes; bumped on any incompatible change. `readLedger` also reads version 1. */
export const ledgerVersion = 2

/** The committed ledger. */
export interface Ledger {
  /** Format version it was read in (an empty ledger has the current one). */
  readonly version: 1 | typeof ledgerVersion
  /** Run id of the last committed run; null before the first commit. */
  readonly committedRunId: string | null
  /** One entry per consumed input file, sorted by path. */
  readonly files: readonly LedgerEntry[]
  /** Latest accepted timestamp (epoch ms) seen in any committed run; null before the first. */
  readonly maxTsMs: number | null
  /** The watermark the last committed run tested up to (epoch ms); windows ending after it were open. */
  readonly watermarkMs: number | null
  /** Name of the entries file under `_state/` that `files` came from; null for an empty or version 1 ledger. */
  readonly entriesFile: string | null
}

/** Run-level facts committed with the file entries. */
export interface LedgerMeta {
  readonly maxTsMs: number | null
  readonly watermarkMs: number | null
}

const entrySchema = z
  .object({
    path: z.string().min(1),
    size: z.number().int().nonnegative(),
    mtimeMs: z.number().nonnegative(),
    fingerprint: z.string().regex(/^[0-9a-f]{64}$/, 'must be a hex SHA-256'),
    runId: z.string().min(1),
    windows: z.tuple([z.number(), z.number()]).nullable().optional(),
  })
  .strict()

const ledgerV1Schema = z
  .object({
    version: z.literal(1),
    committedRunId: z.string().min(1).nullable(),
    files: z.array(entrySchema),
    maxTsMs: z.number().nullable().default(null),
    watermarkMs: z.number().nullable().default(null),
  })
  .strict()

/** A version 1 ledger without its entries, which `isLedgerEntry` checks one by one (10,000 entries: zod took ~0.1 s). */
const envelopeV1Schema = ledgerV1Schema.extend({ files: z.array(z.unknown()) })

/** `ledger.json` of version 2: the commit record. */
const ledgerV2Schema = z
  .object({
    version: z.literal(2),
    committedRunId: z.string().min(1).nullable(),
    entries: z.string().regex(/^entries-[0-9a-f]{64}\.json$/, 'must name an entries-<sha256>.json file'),
    count: z.number().int().nonnegative(),
    maxTsMs: z.number().nullable(),
    watermarkMs: z.number().nullable(),
  })
  .strict()

/** The version 2 entries file: one array per field, `run` indexing `runs`, windows as two nullable columns. */
const entriesSchema = z
  .object({
    version: z.literal(2),
    path: z.array(z.string().min(1)),
    size: z.array(z.number().int().nonnegative()),
    mtimeMs: z.array(z.number().nonnegative()),
    fingerprint: z.array(z.string().regex(/^[0-9a-f]{64}$/, 'must be a hex SHA-256')),
    runs: z.array(z.string().min(1)),
    run: z.array(z.number().int().nonnegative()),
    windowFirst: z.array(z.number().nullable()),
    windowLast: z.array(z.number().nullable()),
  })
  .strict()
type EntriesColumns = z.infer<typeof entriesSchema>

const entryKeys = new Set(['path', 'size', 'mtimeMs', 'fingerprint', 'runId', 'windows'])
const sha256Hex = /^[0-9a-f]{64}$/

/** The same rules as `entrySchema`, without building an issue list; false sends the caller to zod for the message. */
function isLedgerEntry(v: unknown): v is LedgerEntry {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) return false
  for (const k of Object.keys(v)) if (!entryKeys.has(k)) return false
  const e = v as Record<string, unknown>
  const { path, size, mtimeMs, fingerprint, runId, windows } = e
  return (
    isPath(path) &&
    isSize(size) &&
    isMtime(mtimeMs) &&
    isFingerprint(fingerprint) &&
    typeof runId === 'string' &&
    runId.length > 0 &&
    (windows === undefined ||
      windows === null ||
      (Array.isArray(windows) && windows.length === 2 && isFiniteNumber(windows[0]) && isFiniteNumber(windows[1])))
  )
}

const isPath = (v: unknown): v is string => typeof v === 'string' && v.length > 0
const isSize = (v: unknown): v is number => typeof v === 'number' && Number.isSafeInteger(v) && v >= 0
const isMtime = (v: unknown): v is number => typeof v === 'number' && Number.isFinite(v) && v >= 0
const isFingerprint = (v: unknown): v is string => typeof v === 'string' && sha256Hex.test(v)
const isFiniteNumber = (v: unknown): v is number => typeof v === 'number' && Number.isFinite(v)

/** `<root>/_state/ledger.json`. */
export function ledgerPath(root: string): string {
  return join(stateDir(root), 'ledger.json')
}

/** The ledger of a root that has never committed a run. */
export function emptyLedger(): Ledger {
  return {
    version: ledgerVersion,
    committedRunId: null,
    files: [],
    maxTsMs: null,
    watermarkMs: null,
    entriesFile: null,
  }
}

/**
 * Reads the committed ledger; an absent file means an empty ledger (first run). Leftover
 * `*.tmp-<pid>` files of a crashed commit are never read: they were not committed. The entries file
 * must hash to its name, so a damaged or swapped one is caught here.
 *
 * @throws DataError when a file is not valid JSON, not a ledger of a known version, or its entries
 *   file is missing or damaged (names the file and the fix: restore it or rebuild with `run --full`).
 * @throws IoError when it cannot be read.
 */
export async function readLedger(root: string): Promise<Ledger> {
  const file = ledgerPath(root)
  const text = await readStateFile(file)
  if (text === null) return emptyLedger()
  const raw = parseJson(text, file)
  const version = typeof raw === 'object' && raw !== null && 'version' in raw ? raw.version : undefined
  if (version === 1) return readV1(raw, file)
  const parsed = ledgerV2Schema.safeParse(raw)
  if (!parsed.success) {
    throw new DataError(
      `ledger ${file} is not a version ${ledgerVersion} ledger: ${z.prettifyError(parsed.error)}; ${fix}`,
      { context: { file } },
    )
  }
  const record = parsed.data
  const entriesFile = join(stateDir(root), record.entries)
  const bytes = await readStateFile(entriesFile)
  if (bytes === null || sha256(bytes) !== record.entries.slice('entries-'.length, -'.json'.length)) {
    throw new DataError(
      `ledger entries ${entriesFile} ${bytes === null ? 'are missing' : 'do not match their hash'}; ${fix}`,
      { context: { file: entriesFile } },
    )
  }
  const files = entriesOf(parseJson(bytes, entriesFile), entriesFile)
  if (files.length !== record.count) {
    throw new DataError(
      `ledger entries ${entriesFile} hold ${files.length} entries, the ledger says ${record.count}; ${fix}`,
      { context: { file: entriesFile } },
    )
  }
  return {
    version: ledgerVersion,
    committedRunId: record.committedRunId,
    files,
    maxTsMs: record.maxTsMs,
    watermarkMs: record.watermarkMs,
    entriesFile: record.entries,
  }
}

const fix = 'restore it from a backup or rebuild with run --full'

/** The file's text, or null when it does not exist. */
async function readStateFile(file: string): Promise<string | null> {
  try {
    return await readFile(file, 'utf8')
  } catch (cause) {
    if (hasCode(cause, 'ENOENT')) return null
    throw new IoError(`cannot read the ledger ${file}; check permissions on the output root`, {
      context: { file },
      cause,
    })
  }
}

function parseJson(text: string, file: string): unknown {
  try {
    return JSON.parse(text)
  } catch (cause) {
    throw new DataError(`ledger ${file} is not valid JSON; ${fix}`, { context: { file }, cause })
  }
}

function readV1(raw: unknown, file: string): Ledger {
  const envelope = envelopeV1Schema.safeParse(raw)
  if (envelope.success && envelope.data.files.every(isLedgerEntry)) {
    return { ...envelope.data, files: envelope.data.files as LedgerEntry[], entriesFile: null }
  }
  const parsed = ledgerV1Schema.safeParse(raw)
  if (!parsed.success) {
    throw new DataError(`ledger ${file} is not a version 1 ledger: ${z.prettifyError(parsed.error)}; ${fix}`, {
      context: { file },
    })
  }
  return { ...parsed.data, entriesFile: null }
}

/** Entries from the columns of an entries file, checked by hand; zod names the first problem when a check fails. */
function entriesOf(raw: unknown, file: string): LedgerEntry[] {
  const out = fastEntries(raw)
  if (out !== null) return out
  const parsed = entriesSchema.safeParse(raw)
  const problem = parsed.success
    ? 'its columns differ in length or a run index is out of range'
    : z.prettifyError(parsed.error)
  throw new DataError(`ledger entries ${file} are not valid: ${problem}; ${fix}`, { context: { file } })
}

const columnKeys = ['version', 'path', 'size', 'mtimeMs', 'fingerprint', 'runs', 'run', 'windowFirst', 'windowLast']

function fastEntries(raw: unknown): LedgerEntry[] | null {
  if (typeof raw !== 'object' || raw === null || Array.isArray(raw)) return null
  const keys = Object.keys(raw)
  if (keys.length !== columnKeys.length || !columnKeys.every((k) => k in raw)) return null
  const c = raw as Record<string, unknown>
  if (c.version !== 2) return null
  const { path, size, mtimeMs, fingerprint, runs, run, windowFirst, windowLast } = c
  if (
    !Array.isArray(path) ||
    !Array.isArray(size) ||
    !Array.isArray(mtimeMs) ||
    !Array.isArray(fingerprint) ||
    !Array.isArray(runs) ||
    !Array.isArray(run) ||
    !Array.isArray(windowFirst) ||
    !Array.isArray(windowLast)
  ) {
    return null
  }
  const n = path.length
  if ([size, mtimeMs, fingerprint, run, windowFirst, windowLast].some((col) => col.length !== n)) return null
  if (!runs.every((r) => typeof r === 'string' && r.length > 0)) return null
  const out: LedgerEntry[] = new Array(n)
  for (let i = 0; i < n; i++) {
    const p = path[i]
    const s = size[i]
    const m = mtimeMs[i]
    const f = fingerprint[i]
    const r = run[i]
    const w0 = windowFirst[i]
    const w1 = windowLast[i]
    if (!isPath(p) || !isSize(s) || !isMtime(m) || !isFingerprint(f)) return null
    if (typeof r !== 'number' || !Number.isInteger(r) || r < 0 || r >= runs.length) return null
    const runId = runs[r] as string
    if (w0 === null && w1 === null) out[i] = { path: p, size: s, mtimeMs: m, fingerprint: f, runId }
    else if (isFiniteNumber(w0) && isFiniteNumber(w1)) {
      out[i] = { path: p, size: s, mtimeMs: m, fingerprint: f, runId, windows: [w0, w1] }
    } else return null
  }
  return out
}

/** The entries file's bytes for entries already sorted by path: columns, run ids interned, no indentation. */
function entriesText(sorted: readonly LedgerEntry[]): string {
  const runIndex = new Map<string, number>()
  const cols: EntriesColumns = {
    version: 2,
    path: [],
    size: [],
    mtimeMs: [],
    fingerprint: [],
    runs: [],
    run: [],
    windowFirst: [],
    windowLast: [],
  }
  for (const e of sorted) {
    let r = runIndex.get(e.runId)
    if (r === undefined) {
      r = cols.runs.length
      runIndex.set(e.runId, r)
      cols.runs.push(e.runId)
    }
    cols.path.push(e.path)
    cols.size.push(e.size)
    cols.mtimeMs.push(e.mtimeMs)
    cols.fingerprint.push(e.fingerprint)
    cols.run.push(r)
    cols.windowFirst.push(e.windows?.[0] ?? null)
    cols.windowLast.push(e.windows?.[1] ?? null)
  }
  return `${JSON.stringify(cols)}\n`
}

function sha256(text: string): string {
  return createHash('sha256').update(text, 'utf8').digest('hex')
}

/**
 * Commits `files` as the ledger of run `runId`. When `files` is the very array of `previous` (the
 * committed ledger, e.g. a no-op rerun), its entries file is reused; otherwise the entries are
 * written to `entries-<sha256>.json` (tmp file, fsync, rename, fsync of the folder). Then
 * `ledger.json.tmp-<pid>` is written and fsynced, renamed over `ledger.json`, and the folder is
 * fsynced so the rename itself is durable. Entries files no longer committed are removed afterwards.
 *
 * Crash safety: a crash before the rename of `ledger.json` leaves the old ledger in force (tmp files
 * and an uncommitted entries file are removed by `recoverStaging` and `gcLedgerEntries`); after it
 * the new one is, and its entries file was durable before it. There is no moment at which a reader
 * sees a half-written ledger. Entries are stored sorted by path so equal ledgers are byte-identical.
 *
 * Call it only after every table file of the run is published (store/staging.ts): the ledger is
 * the last write of a run.
 *
 * @throws CantCreateError when the state folder or a file in it cannot be written.
 */
export async function commitLedger(
  root: string,
  runId: string,
  files: readonly LedgerEntry[],
  meta: LedgerMeta = { maxTsMs: null, watermarkMs: null },
  previous?: Ledger,
): Promise<Ledger> {
  const dir = stateDir(root)
  const file = ledgerPath(root)
  const sorted = [...files].sort((a, b) => comparePaths(a.path, b.path))
  let entries: string
  try {
    await ensureDir(dir)
    if (previous !== undefined && previous.entriesFile !== null && files === previous.files) {
      entries = previous.entriesFile
    } else {
      const text = entriesText(sorted)
      entries = `entries-${sha256(text)}.json`
      await writeDurably(join(dir, entries), text)
      await fsyncDir(dir)
    }
    const record: z.infer<typeof ledgerV2Schema> = {
      version: ledgerVersion,
      committedRunId: runId,
      entries,
      count: files.length,
      maxTsMs: meta.maxTsMs,
      watermarkMs: meta.watermarkMs,
    }
    await writeDurably(file, `${JSON.stringify(record, null, 1)}\n`)
  } catch (cause) {
    throw new CantCreateError(`cannot commit the ledger ${file}; check free space and permissions on the output root`, {
      context: { file },
      cause,
    })
  }
  await fsyncDir(dir)
  await gcLedgerEntries(root, entries)
  return {
    version: ledgerVersion,
    committedRunId: runId,
    files: sorted,
    maxTsMs: meta.maxTsMs,
    watermarkMs: meta.watermarkMs,
    entriesFile: entries,
  }
}

/** Writes `target` through `<target>.tmp-<pid>` (write, fsync, rename); the tmp file is removed on failure. */
async function writeDurably(target: string, text: string): Promise<void> {
  const tmp = `${target}.tmp-${process.pid}`
  try {
    const handle = await open(tmp, 'w')
    try {
      await handle.writeFile(text, 'utf8')
      await handle.sync()
    } finally {
      await handle.close()
    }
    await rename(tmp, target)
  } catch (err) {
    await unlink(tmp).catch(() => undefined)
    throw err
  }
}

/**
 * Removes entries files under `<root>/_state/` other than `keep` (the committed one; null: the
 * committed ledger is version 1 or empty, so none is in use). Call it under the run lock: after a
 * commit, and at the start of a run to drop an entries file a killed run wrote but never committed.
 * Returns the removed names.
 */
export async function gcLedgerEntries(root: string, keep: string | null): Promise<string[]> {
  let names: string[]
  try {
    names = await readdir(stateDir(root))
  } catch (err) {
    if (hasCode(err, 'ENOENT')) return []
    throw err
  }
  const removed: string[] = []
  for (const name of names.sort(comparePaths)) {
    if (!/^entries-[0-9a-f]{64}\.json$/.test(name) || name === keep) continue
    await unlink(join(stateDir(root), name)).catch((err: unknown) => {
      if (!hasCode(err, 'ENOENT')) throw err
    })
    removed.push(name)
  }
  return removed
}
