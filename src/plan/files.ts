/**
 * Which input files a run must read: a pure diff of the discovered files against the committed
 * ledger (design.md "Data flow": plan). The caller stats the files, asks `filesToFingerprint` which
 * ones need a content fingerprint, computes those (store/fingerprint.ts), then calls `planFiles`.
 * No I/O, no clock.
 */

/** One consumed input file as the ledger records it (store/ledger.ts persists these). */
export interface LedgerEntry {
  /** Absolute path of the input file. */
  readonly path: string
  /** Size in bytes when it was read. */
  readonly size: number
  /** Modification time (epoch ms, as `fs.Stats.mtimeMs`) when it was read. */
  readonly mtimeMs: number
  /** Content fingerprint (store/fingerprint.ts), hex SHA-256. */
  readonly fingerprint: string
  /** Id of the run that read it. */
  readonly runId: string
  /**
   * First and last window start (epoch ms) of the file's partials, so a run opens only the partials
   * files that hold a window it re-merges. Absent or null: unknown (entries of older ledgers, files
   * without partials), and the file's partials are always read.
   */
  readonly windows?: WindowSpan | null | undefined
}

/** `[first, last]` window start (epoch ms), inclusive. */
export type WindowSpan = readonly [number, number]

/**
 * The entries whose partials may hold one of `starts` (window starts, epoch ms): those with a window
 * span containing a start, and those whose span is unknown. Pure; keeps the input order.
 */
export function entriesTouching<E extends Pick<LedgerEntry, 'windows'>>(
  entries: readonly E[],
  starts: readonly number[],
): E[] {
  const sorted = [...starts].sort((a, b) => a - b)
  return entries.filter((e) => {
    const span = e.windows
    if (span === undefined || span === null) return true
    // First start ≥ span[0]; the entry is touched when it is ≤ span[1].
    let lo = 0
    let hi = sorted.length
    while (lo < hi) {
      const mid = (lo + hi) >>> 1
      if ((sorted[mid] as number) < span[0]) lo = mid + 1
      else hi = mid
    }
    return lo < sorted.length && (sorted[lo] as number) <= span[1]
  })
}

/** What discovery knows about a file before reading it. */
export interface StatFile {
  readonly path: string
  readonly size: number
  readonly mtimeMs: number
}

/** A discovered file with its plan decision inputs. */
export interface PlannedFile extends StatFile {
  /** Fingerprint computed this run, or the ledger's when the stat pre-check skipped the read. */
  readonly fingerprint: string | null
  /** The committed ledger entry for this path, if any. */
  readonly previous: LedgerEntry | null
}

/** The diff of one run; every list is sorted by path (code-unit order). */
export interface FilePlan {
  /** Not in the ledger: read them. */
  readonly new: readonly PlannedFile[]
  /** In the ledger with a different fingerprint (or unknown content and different stat): read them. */
  readonly changed: readonly PlannedFile[]
  /** In the ledger but not discovered: drop their partials. */
  readonly deleted: readonly LedgerEntry[]
  /** Same content as the ledger says: skip. `fingerprint` is always set here. */
  readonly unchanged: readonly PlannedFile[]
}

/** Options of the stat pre-check. */
export interface FingerprintCheckOptions {
  /**
   * Fingerprint every file already in the ledger, even when its size and mtime match (`run --verify`).
   * Default false: equal size and mtime mean unchanged without reading a byte.
   */
  readonly verify?: boolean
}

/**
 * True when size and mtime equal the ledger's, so the file counts as unchanged without reading it.
 *
 * Trade-off: this is what makes a no-op run O(number of files) stat calls. It misses a rewrite that
 * keeps the exact size and restores (or cannot move) the mtime: tools that copy with preserved times
 * (`cp -p`, `rsync -t`) onto a file of the same size, or a same-size rewrite within the mtime
 * granularity of a coarse filesystem (1–2 s on some network and FAT-family filesystems).
 * `verify: true` closes that gap at the cost of reading each file's footer.
 */
export function isStatUnchanged(file: StatFile, entry: LedgerEntry): boolean {
  return file.size === entry.size && file.mtimeMs === entry.mtimeMs
}

/**
 * Paths whose fingerprint the caller must compute before `planFiles`: new files (their fingerprint
 * names their partials and goes into the ledger), files whose size or mtime differ from the ledger,
 * and with `verify` every file in the ledger. Sorted by path.
 */
export function filesToFingerprint(
  discovered: readonly StatFile[],
  ledger: readonly LedgerEntry[],
  options: FingerprintCheckOptions = {},
): string[] {
  const byPath = indexLedger(ledger)
  const out: string[] = []
  for (const f of discovered) {
    const entry = byPath.get(f.path)
    if (entry === undefined || options.verify === true || !isStatUnchanged(f, entry)) out.push(f.path)
  }
  return out.sort(comparePaths)
}

/**
 * Classifies discovered files against the committed ledger.
 *
 * - not in the ledger → `new` (its fingerprint, if given, is carried along);
 * - in the ledger with a fingerprint given → `unchanged` if equal to the ledger's, else `changed`.
 *   An equal fingerprint with a new mtime (a `touch`) is unchanged; the caller records the new stat;
 * - in the ledger without a fingerprint → `unchanged` if size and mtime match (`isStatUnchanged`),
 *   else `changed` (content unknown, so re-read: the safe side);
 * - in the ledger but not discovered → `deleted`.
 *
 * A renamed or moved file is a `deleted` old path plus a `new` path, even with identical bytes:
 * Hive `name=value` folder segments are key columns, so a move can change the series of every row,
 * and partials are attributed per path.
 *
 * Duplicate paths in `discovered` keep the first occurrence. Every output list is sorted by path.
 */
export function planFiles(
  discovered: readonly StatFile[],
  ledger: readonly LedgerEntry[],
  fingerprints: ReadonlyMap<string, string> = new Map(),
): FilePlan {
  const byPath = indexLedger(ledger)
  const seen = new Set<string>()
  const added: PlannedFile[] = []
  const changed: PlannedFile[] = []
  const unchanged: PlannedFile[] = []
  for (const f of discovered) {
    if (seen.has(f.path)) continue
    seen.add(f.path)
    const entry = byPath.get(f.path) ?? null
    const fp = fingerprints.size === 0 ? null : (fingerprints.get(f.path) ?? null)
    // Literals, not spreads: this runs once per file of the lake on every run.
    if (entry === null) {
      added.push({ path: f.path, size: f.size, mtimeMs: f.mtimeMs, fingerprint: fp, previous: null })
    } else if (fp !== null) {
      const target = fp === entry.fingerprint ? unchanged : changed
      target.push({ path: f.path, size: f.size, mtimeMs: f.mtimeMs, fingerprint: fp, previous: entry })
    } else if (isStatUnchanged(f, entry)) {
      unchanged.push({
        path: f.path,
        size: f.size,
        mtimeMs: f.mtimeMs,
        fingerprint: entry.fingerprint,
        previous: entry,
      })
    } else {
      changed.push({ path: f.path, size: f.size, mtimeMs: f.mtimeMs, fingerprint: null, previous: entry })
    }
  }
  const deleted = [...byPath.values()].filter((e) => !seen.has(e.path))
  const byFile = (a: { path: string }, b: { path: string }): number => comparePaths(a.path, b.path)
  return {
    new: added.sort(byFile),
    changed: changed.sort(byFile),
    deleted: deleted.sort(byFile),
    unchanged: unchanged.sort(byFile),
  }
}

/**
 * The ledger entries to commit after a run that read the `new` and `changed` files of `plan`:
 * those get `runId` and their new fingerprint; `unchanged` files keep the run id that read them,
 * with their current size and mtime (so a touched file is not fingerprinted again next time);
 * `deleted` files are dropped. Sorted by path. `spans` gives the window span of each file read this
 * run (absent: unknown); unchanged files keep the span their entry had.
 *
 * @throws Error (a bug, exit 70) when a new or changed file has no fingerprint: fingerprint every
 *   path `filesToFingerprint` lists before planning.
 */
export function ledgerAfter(
  plan: FilePlan,
  runId: string,
  spans: ReadonlyMap<string, WindowSpan> = new Map(),
): LedgerEntry[] {
  const out: LedgerEntry[] = []
  for (const f of plan.unchanged) {
    const windows = f.previous?.windows
    out.push({
      path: f.path,
      size: f.size,
      mtimeMs: f.mtimeMs,
      fingerprint: f.fingerprint ?? f.previous?.fingerprint ?? '',
      runId: f.previous?.runId ?? runId,
      ...(windows === undefined || windows === null ? {} : { windows }),
    })
  }
  for (const f of [...plan.new, ...plan.changed]) {
    if (f.fingerprint === null) throw new Error(`no fingerprint for ${f.path}; fingerprint it before planning`)
    const windows = spans.get(f.path)
    out.push({
      path: f.path,
      size: f.size,
      mtimeMs: f.mtimeMs,
      fingerprint: f.fingerprint,
      runId,
      ...(windows === undefined ? {} : { windows }),
    })
  }
  return out.sort((a, b) => comparePaths(a.path, b.path))
}

/** Code-unit order, the same in every locale (never `localeCompare`: runs must be reproducible). */
export function comparePaths(a: string, b: string): number {
  return a < b ? -1 : a > b ? 1 : 0
}

function indexLedger(ledger: readonly LedgerEntry[]): Map<string, LedgerEntry> {
  const m = new Map<string, LedgerEntry>()
  for (const e of ledger) if (!m.has(e.path)) m.set(e.path, e)
  return m
}

/**
 * True when committing `plan` would record exactly the entries of `committed` (sorted by path): no
 * file new, changed or deleted, and every unchanged file with the size, mtime and fingerprint its
 * entry has. The caller then commits `committed` itself, and the ledger reuses its entries file.
 */
export function entriesUnchanged(plan: FilePlan, committed: readonly LedgerEntry[]): boolean {
  if (plan.new.length > 0 || plan.changed.length > 0 || plan.deleted.length > 0) return false
  if (plan.unchanged.length !== committed.length) return false
  for (const f of plan.unchanged) {
    const e = f.previous
    if (e === null || e.size !== f.size || e.mtimeMs !== f.mtimeMs || e.fingerprint !== f.fingerprint) return false
  }
  return true
}
