/**
 * The ledger: which input files the published tables were computed from (design.md "Words we use",
 * "Publish"). One JSON file, `<root>/_state/ledger.json`, replaced by an atomic rename. Committing it
 * is THE commit point of a run: before the rename completes, the previous ledger (and so the previous
 * run's view of the inputs) is in force; after it, the new one is.
 */
import { open, readFile, rename, unlink } from 'node:fs/promises'
import { join } from 'node:path'
import { z } from 'zod'
import { CantCreateError, DataError, IoError } from '../errors.js'
import type { LedgerEntry } from '../plan/files.js'
import { comparePaths } from '../plan/files.js'
import { ensureDir, fsyncDir, hasCode, stateDir } from './paths.js'

export type { LedgerEntry } from '../plan/files.js'

/** Format version of `ledger.json`; bumped on any incompatible change. */
export const ledgerVersion = 1

/** The committed ledger. */
export interface Ledger {
  readonly version: typeof ledgerVersion
  /** Run id of the last committed run; null before the first commit. */
  readonly committedRunId: string | null
  /** One entry per consumed input file, sorted by path. */
  readonly files: readonly LedgerEntry[]
  /** Latest accepted timestamp (epoch ms) seen in any committed run; null before the first. */
  readonly maxTsMs: number | null
  /** The watermark the last committed run tested up to (epoch ms); windows ending after it were open. */
  readonly watermarkMs: number | null
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

const ledgerSchema = z
  .object({
    version: z.literal(ledgerVersion),
    committedRunId: z.string().min(1).nullable(),
    files: z.array(entrySchema),
    maxTsMs: z.number().nullable().default(null),
    watermarkMs: z.number().nullable().default(null),
  })
  .strict()

/** The ledger without its entries, which `isLedgerEntry` checks one by one (10,000 entries: zod took ~0.1 s). */
const envelopeSchema = ledgerSchema.extend({ files: z.array(z.unknown()) })

const entryKeys = new Set(['path', 'size', 'mtimeMs', 'fingerprint', 'runId', 'windows'])
const sha256Hex = /^[0-9a-f]{64}$/

/** The same rules as `entrySchema`, without building an issue list; false sends the caller to zod for the message. */
function isLedgerEntry(v: unknown): v is LedgerEntry {
  if (typeof v !== 'object' || v === null || Array.isArray(v)) return false
  for (const k of Object.keys(v)) if (!entryKeys.has(k)) return false
  const e = v as Record<string, unknown>
  const { path, size, mtimeMs, fingerprint, runId, windows } = e
  return (
    typeof path === 'string' &&
    path.length > 0 &&
    typeof size === 'number' &&
    Number.isSafeInteger(size) &&
    size >= 0 &&
    typeof mtimeMs === 'number' &&
    Number.isFinite(mtimeMs) &&
    mtimeMs >= 0 &&
    typeof fingerprint === 'string' &&
    sha256Hex.test(fingerprint) &&
    typeof runId === 'string' &&
    runId.length > 0 &&
    (windows === undefined ||
      windows === null ||
      (Array.isArray(windows) &&
        windows.length === 2 &&
        typeof windows[0] === 'number' &&
        Number.isFinite(windows[0]) &&
        typeof windows[1] === 'number' &&
        Number.isFinite(windows[1])))
  )
}

/** `<root>/_state/ledger.json`. */
export function ledgerPath(root: string): string {
  return join(stateDir(root), 'ledger.json')
}

/** The ledger of a root that has never committed a run. */
export function emptyLedger(): Ledger {
  return { version: ledgerVersion, committedRunId: null, files: [], maxTsMs: null, watermarkMs: null }
}

/**
 * Reads the committed ledger; an absent file means an empty ledger (first run). Leftover
 * `ledger.json.tmp-*` files of a crashed commit are never read: they were not committed.
 *
 * @throws DataError when the file is not valid JSON or not a ledger of this version (names the
 *   file and the fix: restore it or rebuild with `run --full`).
 * @throws IoError when it cannot be read.
 */
export async function readLedger(root: string): Promise<Ledger> {
  const file = ledgerPath(root)
  let text: string
  try {
    text = await readFile(file, 'utf8')
  } catch (cause) {
    if (hasCode(cause, 'ENOENT')) return emptyLedger()
    throw new IoError(`cannot read the ledger ${file}; check permissions on the output root`, {
      context: { file },
      cause,
    })
  }
  let raw: unknown
  try {
    raw = JSON.parse(text)
  } catch (cause) {
    throw new DataError(`ledger ${file} is not valid JSON; restore it from a backup or rebuild with run --full`, {
      context: { file },
      cause,
    })
  }
  const envelope = envelopeSchema.safeParse(raw)
  if (envelope.success && envelope.data.files.every(isLedgerEntry)) {
    return { ...envelope.data, files: envelope.data.files as LedgerEntry[] }
  }
  const parsed = ledgerSchema.safeParse(raw)
  if (!parsed.success) {
    throw new DataError(
      `ledger ${file} is not a version ${ledgerVersion} ledger: ${z.prettifyError(parsed.error)}; restore it from a backup or rebuild with run --full`,
      { context: { file } },
    )
  }
  return parsed.data
}

/**
 * Commits `files` as the ledger of run `runId`: writes `ledger.json.tmp-<pid>`, fsyncs it, renames
 * it over `ledger.json`, then fsyncs the folder so the rename itself is durable.
 *
 * Crash safety: a crash before the rename leaves the old ledger in force (the tmp file is ignored by
 * `readLedger` and removed by `recoverStaging`); after the rename the new one is. There is no
 * moment at which a reader sees a half-written ledger. Entries are stored sorted by path so equal
 * ledgers are byte-identical.
 *
 * Call it only after every table file of the run is published (store/staging.ts): the ledger is
 * the last write of a run.
 *
 * @throws CantCreateError when the state folder or the tmp file cannot be written.
 */
export async function commitLedger(
  root: string,
  runId: string,
  files: readonly LedgerEntry[],
  meta: LedgerMeta = { maxTsMs: null, watermarkMs: null },
): Promise<Ledger> {
  const ledger: Ledger = {
    version: ledgerVersion,
    committedRunId: runId,
    files: [...files]
      .map((e) => ({
        path: e.path,
        size: e.size,
        mtimeMs: e.mtimeMs,
        fingerprint: e.fingerprint,
        runId: e.runId,
        ...(e.windows === undefined || e.windows === null ? {} : { windows: e.windows }),
      }))
      .sort((a, b) => comparePaths(a.path, b.path)),
    maxTsMs: meta.maxTsMs,
    watermarkMs: meta.watermarkMs,
  }
  const file = ledgerPath(root)
  const tmp = `${file}.tmp-${process.pid}`
  try {
    await ensureDir(stateDir(root))
    const handle = await open(tmp, 'w')
    try {
      await handle.writeFile(`${JSON.stringify(ledger, null, 1)}\n`, 'utf8')
      await handle.sync()
    } finally {
      await handle.close()
    }
    await rename(tmp, file)
  } catch (cause) {
    await unlink(tmp).catch(() => undefined)
    throw new CantCreateError(`cannot commit the ledger ${file}; check free space and permissions on the output root`, {
      context: { file },
      cause,
    })
  }
  await fsyncDir(stateDir(root))
  return ledger
}
