/**
 * One run of the job (design.md "Data flow"): lock → recover → discover → plan against the ledger
 * → read new and changed files → store their partials → re-merge the affected windows from partials
 * → fit → test → write tables to staging → publish → commit the ledger (the commit point) → stage
 * and deliver digests. I/O lives here and in the stages it calls; the math it calls is pure.
 *
 * Crash safety: partials files are named by content and written before the commit, so an
 * uncommitted run leaves only garbage that the next run collects; table files are staged and
 * published by renames that `recoverStaging` rolls back unless the ledger committed. A rerun after
 * any crash redoes the same work from the same committed state and converges to the same tables.
 */
import { rm } from 'node:fs/promises'
import path from 'node:path'
import v8 from 'node:v8'
import type { DuckDBConnection } from '@duckdb/node-api'
import type { Config } from '../config/schema.js'
import { type Discovery, discoverFiles } from '../dataset/discover.js'
import { openDuckDb } from '../dataset/duckdb.js'
import { NoInputError } from '../errors.js'
import { type MergedState, mergePartials } from '../kernel/merge-partials.js'
import { msPerXUnit, previousWindowStart, type WindowSpec, windowEndOf, windowStartOf } from '../kernel/window.js'
import type { Logger } from '../log.js'
import { flushOutbox, undeliveredError } from '../notify/flush.js'
import { stageDigests } from '../notify/stage.js'
import {
  entriesTouching,
  entriesUnchanged,
  type FilePlan,
  ledgerAfter,
  planFiles,
  type WindowSpan,
} from '../plan/files.js'
import { affectedWindowStarts, windowStartsBetween, withBaselineWindows } from '../plan/windows.js'
import { fingerprintFiles } from '../store/fingerprint.js'
import { commitLedger, emptyLedger, gcLedgerEntries, type Ledger, readLedger } from '../store/ledger.js'
import { acquireRunLock } from '../store/lock.js'
import {
  gcPartials,
  ledgerPartialsFiles,
  partialsFilePath,
  partialsFolders,
  readPartialWindowStarts,
  readPartials as readStoredPartials,
  writePartials,
} from '../store/partials.js'
import { ensureDir } from '../store/paths.js'
import { createStaging, discardStaging, publish, recoverStaging } from '../store/staging.js'
import { partitionFileName } from '../tables/columns.js'
import { listTableFiles } from '../tables/read.js'
import { replacePartitions, replaceWindows } from '../tables/write.js'
import type { PartialMoments, SourceFile } from '../types.js'
import { fitRows } from './fit-rows.js'
import { heapAdvice } from './heap-check.js'
import { discoverOptionsOf, momentsPlanOf, windowSpecOf } from './plan.js'
import { readPartials } from './read.js'
import { shiftRows } from './shift-rows.js'
import { newRunId, type RunSummary, runRowOf, verdictCounts } from './summary.js'

export interface RunOptions {
  /** Ignore the ledger: rebuild every table from every file. */
  readonly full?: boolean
  /** Also recompute the windows overlapping [fromMs, toMs) (epoch ms). */
  readonly fromMs?: number
  readonly toMs?: number
  /** Fingerprint every file, even when size and mtime match the ledger. */
  readonly verify?: boolean
  /** How long to wait for another run's lock before exiting 75 (default 0: fail at once). */
  readonly lockWaitMs?: number
  /** Skip webhook delivery (notices stay in the outbox). */
  readonly noDeliver?: boolean
}

export interface RunDeps {
  readonly log: Logger
  readonly now: () => number
  readonly signal?: AbortSignal
  /** Called with the running total of rows read (progress display). */
  readonly onRows?: (rows: number) => void
  /** Called with how far a Parquet scan that counts no rows as it goes is, 0 … 1 (progress display). */
  readonly onScan?: (fraction: number) => void
  /** Test hook: the fetch used for webhooks (default global fetch). */
  readonly fetch?: typeof fetch
  /**
   * Input discovery already started by the caller with `discoverOptionsOf(config)` (the CLI starts it in
   * a worker thread while the engines load); default: discover here, after taking the lock.
   */
  readonly discovery?: Promise<Discovery>
}

/** Runs the job once; returns its summary. Throws SlopeshiftError subclasses for expected failures. */
export async function runJob(config: Config, options: RunOptions, deps: RunDeps): Promise<RunSummary> {
  const startedAt = deps.now()
  const runId = newRunId(startedAt)
  const log = deps.log.child({ runId, job: config.job })
  const root = config.output.root
  await ensureDir(root)
  const lockAskedAt = performance.now()
  const release = await acquireRunLock(root, { runId, waitMs: options.lockWaitMs ?? 0 })
  // A listing started before a wait for another run's lock may be stale (that run may have been the one
  // that dropped or added files): list again after a wait.
  if (deps.discovery !== undefined && performance.now() - lockAskedAt > staleListingMs) {
    deps.discovery.catch(() => undefined)
    const { discovery: _stale, ...fresh } = deps
    deps = fresh
  }
  try {
    // Spill files a killed run left behind (DuckDB removes its own on a clean close); we hold the lock.
    await rm(spillDir(root), { recursive: true, force: true })
    await ensureDir(spillDir(root)) // DuckDB creates only the last folder of its spill path
    // One DuckDB session for the run's own state and tables: a session per partials file or table
    // would cost an engine start each (measured: 1,000 new files took minutes instead of seconds).
    // It starts in the background while the committed state is read.
    const opening = openDuckDb({
      threads: config.engine.threads,
      memoryLimit: config.engine.memoryLimit,
      tempDirectory: path.join(spillDir(root), 'session'),
    })
    let committed: Ledger
    try {
      committed = await settleState(root, log)
    } catch (err) {
      await opening.then(
        (db) => db.close(),
        () => undefined,
      )
      throw err
    }
    const db = await opening
    try {
      return await runLocked(
        config,
        options,
        { ...deps, log },
        runId,
        startedAt,
        db.connection,
        () => db.connect(),
        committed,
      )
    } finally {
      db.close()
    }
  } finally {
    await release()
  }
}

/**
 * The committed state a run starts from: the ledger, after rolling back a publish whose ledger never
 * committed and dropping partials no committed entry references (both left by a killed run).
 */
async function settleState(root: string, log: Logger): Promise<Ledger> {
  const committed = await readLedger(root)
  const recovery = await recoverStaging(root, committed.committedRunId)
  if (recovery.rolledBack.length > 0) log.warn({ runs: recovery.rolledBack }, 'uncommitted publish rolled back')
  await gcLedgerEntries(root, committed.entriesFile)
  await gcPartials(root, committed)
  return committed
}

async function runLocked(
  config: Config,
  options: RunOptions,
  deps: RunDeps,
  runId: string,
  startedAt: number,
  connection: DuckDBConnection,
  connect: () => Promise<DuckDBConnection>,
  committed: Ledger,
): Promise<RunSummary> {
  const { log, signal } = deps
  const root = config.output.root
  const window = windowSpecOf(config)
  const plan = momentsPlanOf(config)
  const k = config.detect.baselineWindows
  const ledger: Ledger = options.full === true ? emptyLedger() : committed
  log.info({ window: window.label, xUnit: config.window.xUnit, full: options.full === true }, 'run started')

  // Discover and plan.
  const discovery = await (deps.discovery ?? discoverFiles(config.source.paths, discoverOptionsOf(config)))
  for (const f of discovery.ignored) log.debug({ file: f.path, reason: f.reason }, 'file ignored')
  if (discovery.files.length === 0 && ledger.files.length === 0) {
    throw new NoInputError(
      `no Parquet or Arrow files found under ${config.source.paths.join(', ')}; check source.paths in the config`,
    )
  }
  const fingerprints = await fingerprintFiles(discovery.files, ledger.files, { verify: options.verify === true })
  const filePlan = planFilesFor(discovery.files, ledger, fingerprints, committed, options.full === true)
  const byPath = new Map(discovery.files.map((f) => [f.path, f]))
  const toRead = [...filePlan.new, ...filePlan.changed].map((f) => byPath.get(f.path) as SourceFile)
  log.info(
    {
      new: filePlan.new.length,
      changed: filePlan.changed.length,
      deleted: filePlan.deleted.length,
      unchanged: filePlan.unchanged.length,
    },
    'files planned',
  )

  // Read new and changed files; store their partials under content-addressed names.
  const read = await readPartials(toRead, plan, {
    threads: config.engine.threads,
    memoryLimit: config.engine.memoryLimit,
    // Its own folder: two DuckDB instances would name their spill files alike.
    tempDirectory: path.join(spillDir(root), 'read'),
    log,
    ...(signal ? { signal } : {}),
    ...(deps.onRows ? { onRows: deps.onRows } : {}),
    ...(deps.onScan ? { onScan: deps.onScan } : {}),
  })
  signal?.throwIfAborted()
  const heap = heapAdvice(read.partials.length, v8.getHeapStatistics().heap_size_limit)
  if (heap !== null) {
    log.warn(
      { partials: read.partials.length, ...heap },
      `this run holds ${read.partials.length} (file, series, window) partials and may need about ` +
        `${heap.estimatedMb} MB of JavaScript heap, more than the ${heap.limitMb} MB limit allows: if it stops with ` +
        `"heap out of memory", rerun with NODE_OPTIONS=--max-old-space-size=${heap.suggestedMb} (and that much ` +
        'memory free), or split the input across jobs with their own output.root',
    )
  }
  const byFile = groupByFile(read.partials)
  let mark = performance.now()
  await writeAllPartials(
    [...filePlan.new, ...filePlan.changed].map((f) => ({
      target: partialsFilePath(root, f.path, f.fingerprint ?? ''),
      partials: byFile.get(f.path) ?? [],
    })),
    connection,
    connect,
    signal,
  )
  signal?.throwIfAborted()

  // Which windows change: partials replaced, baselines moved, windows closed by the new watermark, --from/--to.
  const replacedEntries = [...filePlan.changed.map((f) => f.previous), ...filePlan.deleted].filter((e) => e !== null)
  const replacedFiles = ledgerPartialsFiles(root, replacedEntries)
  // --full re-merges every window the replaced partials held: only their window starts matter then, and reading
  // their moments into objects cost ~0.5 s and ~75 MB on the 10 M-row bench.
  const oldPartials = options.full === true ? [] : await readStoredPartials(replacedFiles, { connection })
  const oldStarts = options.full === true ? await readPartialWindowStarts(replacedFiles, { connection }) : []
  const lap = (stage: string, extra: Record<string, number> = {}): void => {
    const now = performance.now()
    // Memory beside each stage: where a run's peak comes from is otherwise invisible to operators.
    const mem = process.memoryUsage()
    const mb = (bytes: number) => Math.round(bytes / 1_048_576)
    log.debug(
      { stage, durationMs: Math.round(now - mark), rssMb: mb(mem.rss), heapUsedMb: mb(mem.heapUsed), ...extra },
      'stage finished',
    )
    mark = now
  }
  lap('partials stored', { files: toRead.length })
  // `ledger`, not `committed`: --full ignores the old latest timestamp too (its files may be gone).
  const maxTsMs = maxOf(ledger.maxTsMs, maxTimestampMs(read.partials, config))
  const watermarkMs =
    (config.detect.watermark === 'clock' ? startedAt : (maxTsMs ?? startedAt)) - config.detect.allowedLatenessMs
  const starts = new Set<number>(affectedWindowStarts(oldPartials, read.partials, k, window))
  for (const s of withBaselineWindows(oldStarts, k, window)) starts.add(s)
  for (const s of closedSince(window, ledger.watermarkMs, watermarkMs, maxTsMs)) starts.add(s)
  if (options.fromMs !== undefined && options.toMs !== undefined) {
    for (const s of windowStartsBetween(window, options.fromMs, options.toMs)) starts.add(s)
  }
  // Retention: windows starting before the cutoff are frozen (never recomputed) and their partitions dropped.
  const cutoffMs = config.output.retentionDays > 0 ? watermarkMs - config.output.retentionDays * 86_400_000 : null
  if (cutoffMs !== null) for (const s of [...starts]) if (s < cutoffMs) starts.delete(s)
  const readStarts = new Set(starts)
  for (const s of starts) {
    let b = s
    for (let j = 0; j < k; j++) {
      b = previousWindowStart(window, b)
      readStarts.add(b)
    }
  }

  // Re-merge those windows from all current partials (never subtract: statistics.md §1.6).
  const stored =
    readStarts.size === 0
      ? []
      : await readStoredPartials(
          ledgerPartialsFiles(
            root,
            // Only files whose partials hold one of these windows (all files when the span is unknown).
            entriesTouching(
              filePlan.unchanged.map((f) => ({
                path: f.path,
                fingerprint: f.fingerprint ?? '',
                windows: f.previous?.windows ?? null,
              })),
              [...readStarts],
            ),
          ),
          { windowStarts: [...readStarts], connection },
        )
  const fresh = read.partials.filter((p) => readStarts.has(p.windowStartMs))
  const states: MergedState[] = mergePartials([...stored, ...fresh])
  lap('partials merged', { states: states.length })
  const current = states.filter((s) => starts.has(s.windowStartMs))
  const fits = fitRows(current, { config, window, watermarkMs, runId, computedAtMs: startedAt })
  lap('fitted', { fits: fits.rowCount })
  // The closed windows with data, i.e. the fits marked closed (fitRows skips empty states).
  const targets = current
    .filter((s) => s.moments.n > 0 && windowEndOf(window, s.windowStartMs) <= watermarkMs)
    .map((s) => ({ id: s.id, key: s.key, windowStartMs: s.windowStartMs }))
  const shifts = shiftRows(targets, states, { config, window, runId })
  lap('tested', { shifts: shifts.length })
  signal?.throwIfAborted()

  // Stage the digests, then the tables, publish, commit.
  const tables = { fits: path.join(root, 'fits'), shifts: path.join(root, 'shifts'), runs: path.join(root, 'runs') }
  const rowsRead = read.stats.reduce((a, s) => a + s.rows, 0)
  const rowsSkipped = read.stats.reduce((a, s) => a + s.skipped, 0)
  const stage = await stageDigests({
    job: config.job,
    runId,
    keyColumns: config.source.keys,
    xUnit: config.window.xUnit,
    timeZone: config.window.timeZone,
    rows: shifts,
    root,
    webhooks: config.notify.webhooks,
    cooldownWindows: config.notify.cooldownWindows,
    window,
    nowMs: startedAt,
  })
  const queued = stage.staged.filter((s) => s.enqueue?.kind === 'queued').length
  lap('digests staged')
  // What the summary says of the data, counted once: summaryOf runs for the runs row and again at the end, and a
  // run over 400,000 windows spent ~0.3 s counting these each time.
  const counted = {
    series: new Set(current.map((s) => s.id)).size,
    windows: {
      total: fits.rowCount,
      open: fits.open,
      remerged: current.length,
    },
    verdicts: verdictCounts(shifts),
    shifts: shifts.filter((s) => s.verdict === 'shift').length,
  }
  const summaryOf = (endedAt: number, sent: number, pending: number): RunSummary => ({
    run_id: runId,
    job: config.job,
    status: 'ok',
    error: null,
    started_at: new Date(startedAt).toISOString(),
    ended_at: new Date(endedAt).toISOString(),
    duration_ms: endedAt - startedAt,
    files: {
      new: filePlan.new.length,
      changed: filePlan.changed.length,
      deleted: filePlan.deleted.length,
      skipped: filePlan.unchanged.length,
      read: toRead.length,
      ignored: discovery.ignored.length,
    },
    rows: { read: rowsRead, skipped: rowsSkipped },
    ...counted,
    notices: { sent, pending },
    output: { root, ...tables },
  })

  // The three tables are staged at once, each on its own connection: DuckDB encodes one while this
  // thread gathers the next. All settle before any error is thrown.
  const staging = await createStaging(root, runId)
  const write = { keyColumns: config.source.keys, compression: config.output.compression }
  const replace = [...starts]
  const [fitsWritten, shiftsWritten, runsWritten] = await Promise.allSettled([
    replaceWindows('fits', fits, {
      ...write,
      connection,
      dir: tables.fits,
      stagingDir: path.join(staging, 'fits'),
      replaceWindowStarts: replace,
    }),
    connect().then((c) =>
      replaceWindows('shifts', shifts, {
        ...write,
        connection: c,
        dir: tables.shifts,
        stagingDir: path.join(staging, 'shifts'),
        replaceWindowStarts: replace,
      }),
    ),
    // Merged into the day's runs/ partition: earlier runs' rows of that day stay.
    connect().then((c) =>
      replacePartitions('runs', [runRowOf(summaryOf(deps.now(), 0, queued))], {
        ...write,
        connection: c,
        dir: tables.runs,
        stagingDir: path.join(staging, 'runs'),
      }),
    ),
  ])
  const remove: string[] = []
  for (const [table, r] of [
    ['fits', fitsWritten],
    ['shifts', shiftsWritten],
    ['runs', runsWritten],
  ] as const) {
    if (r.status === 'rejected') throw r.reason
    if ('removed' in r.value) for (const p of r.value.removed) remove.push(`${table}/${p}/${partitionFileName}`)
  }
  if (options.full === true) {
    for (const table of ['fits', 'shifts'] as const) {
      for (const f of await listTableFiles(table, tables[table])) {
        remove.push(path.relative(root, f).split(path.sep).join('/'))
      }
    }
  }
  if (cutoffMs !== null) {
    const cutoffDate = new Date(cutoffMs).toISOString().slice(0, 10)
    for (const table of ['fits', 'shifts', 'runs'] as const) {
      for (const f of await listTableFiles(table, tables[table])) {
        const date = /=(\d{4}-\d{2}-\d{2})$/.exec(path.basename(path.dirname(f)))?.[1]
        if (date !== undefined && date < cutoffDate) remove.push(path.relative(root, f).split(path.sep).join('/'))
      }
    }
  }
  signal?.throwIfAborted()
  lap('tables staged')
  await publish(staging, root, { remove })
  // A rerun that changed no entry commits the committed entries as they are (the ledger reuses their file).
  const entries = entriesUnchanged(filePlan, committed.files)
    ? committed.files
    : ledgerAfter(filePlan, runId, windowSpans(read.partials))
  await commitLedger(root, runId, entries, { maxTsMs, watermarkMs }, committed)
  lap('published and committed')
  await discardStaging(staging)
  // Partials of replaced and deleted files go now; a run that replaced nothing has nothing to collect.
  if (options.full === true || filePlan.changed.length > 0 || filePlan.deleted.length > 0) {
    await gcPartials(root, { files: entries })
  }
  log.info({ files: toRead.length, rows: rowsRead, fits: fits.rowCount, shifts: shifts.length }, 'run committed')

  // Deliver what waits in the outbox (this run's digest and any left by earlier runs).
  let sent = 0
  let pending = queued
  if (options.noDeliver !== true && config.notify.webhooks.length > 0) {
    const flushed = await flushOutbox(
      root,
      { webhooks: config.notify.webhooks, maxAgeHours: config.notify.maxAgeHours },
      { log, ...(deps.fetch ? { fetch: deps.fetch } : {}), ...(signal ? { signal } : {}) },
    )
    sent = flushed.sent
    pending = flushed.pending
    const summary = summaryOf(deps.now(), sent, pending)
    const undelivered = undeliveredError(flushed)
    if (undelivered !== null) {
      log.error({ pending, runSummary: summary.files }, 'digests left undelivered; results are committed')
      throw undelivered
    }
    return summary
  }
  return summaryOf(deps.now(), sent, pending)
}

/** The file plan; `--full` treats every committed file as deleted and every discovered one as new. */
function planFilesFor(
  files: readonly SourceFile[],
  ledger: Ledger,
  fingerprints: ReadonlyMap<string, string>,
  committed: Ledger,
  full: boolean,
): FilePlan {
  const p = planFiles(files, ledger.files, fingerprints)
  return full ? { ...p, deleted: committed.files } : p
}

function groupByFile(partials: readonly PartialMoments[]): Map<string, PartialMoments[]> {
  const m = new Map<string, PartialMoments[]>()
  for (const p of partials) {
    const list = m.get(p.file)
    if (list === undefined) m.set(p.file, [p])
    else list.push(p)
  }
  return m
}

function maxOf(a: number | null, b: number | null): number | null {
  return a === null ? b : b === null ? a : Math.max(a, b)
}

/** Latest accepted timestamp (epoch ms) over partials, or null when there are none. */
function maxTimestampMs(partials: readonly PartialMoments[], config: Config): number | null {
  const unit = msPerXUnit[config.window.xUnit]
  let max: number | null = null
  for (const p of partials) {
    if (p.moments.n === 0) continue
    const t = p.windowStartMs + p.moments.xMax * unit
    if (max === null || t > max) max = t
  }
  return max
}

/**
 * Starts of the windows that closed since the last committed watermark: their end lies in
 * (previous, current]. Bounded by the data's latest timestamp so a clock watermark far ahead does not
 * enumerate empty windows.
 */
function closedSince(spec: WindowSpec, previousMs: number | null, currentMs: number, maxTsMs: number | null): number[] {
  if (previousMs === null || !(currentMs > previousMs) || maxTsMs === null) return []
  const out: number[] = []
  const limit = Math.min(currentMs, maxTsMs + 1)
  for (let s = windowStartOf(spec, previousMs - 1); s < limit; s = windowEndOf(spec, s)) {
    const end = windowEndOf(spec, s)
    if (end > previousMs && end <= currentMs) out.push(s)
    if (out.length > 100_000) break
  }
  return out
}

/** First and last window start of each file's partials (every partial counts, even one of skipped rows only). */
function windowSpans(partials: readonly PartialMoments[]): Map<string, WindowSpan> {
  const out = new Map<string, [number, number]>()
  for (const p of partials) {
    const span = out.get(p.file)
    if (span === undefined) out.set(p.file, [p.windowStartMs, p.windowStartMs])
    else {
      if (p.windowStartMs < span[0]) span[0] = p.windowStartMs
      if (p.windowStartMs > span[1]) span[1] = p.windowStartMs
    }
  }
  return out
}

/** How long a wait for the run lock may last before a listing started earlier is thrown away. */
const staleListingMs = 1000

/** `<root>/_state/spill`: DuckDB's spill folders (one per instance), on the job's volume, not the working folder. */
function spillDir(root: string): string {
  return path.join(root, '_state', 'spill')
}

/** Partials files written at once: each is a small COPY whose time is mostly the engine's fixed cost per statement. */
const partialsLanes = 4

/**
 * Writes each file's partials (store/partials.ts `writePartials`), up to `partialsLanes` at a time on
 * their own connections: 1,000 new files took 7.2 s one by one. Their folders are made once before and
 * fsynced once after (not per file), which still makes every rename durable before the ledger commits.
 * After a failure no lane starts another file, every lane settles, and the first error is thrown; files
 * already written are content-addressed and unreferenced until the ledger commits, so the next run's GC
 * removes them.
 */
async function writeAllPartials(
  jobs: readonly { readonly target: string; readonly partials: readonly PartialMoments[] }[],
  first: DuckDBConnection,
  connect: () => Promise<DuckDBConnection>,
  signal: AbortSignal | undefined,
): Promise<void> {
  const targets = jobs.map((j) => j.target)
  await partialsFolders(targets, false)
  const lanes = Math.max(1, Math.min(partialsLanes, jobs.length))
  const connections = [first]
  for (let i = 1; i < lanes; i++) connections.push(await connect())
  let next = 0
  let failed = false
  const results = await Promise.allSettled(
    connections.map(async (connection) => {
      for (let i = next++; i < jobs.length && !failed; i = next++) {
        signal?.throwIfAborted()
        const job = jobs[i] as (typeof jobs)[number]
        try {
          await writePartials(job.target, job.partials, { connection, syncFolder: false })
        } catch (err) {
          failed = true
          throw err
        }
      }
    }),
  )
  for (const r of results) if (r.status === 'rejected') throw r.reason
  await partialsFolders(targets, true)
}
