/**
 * Content fingerprints of input files: cheap (reads O(footer) bytes, never the whole file) but sound
 * enough to tell a rewritten file from a touched one (issue #4, ledger).
 */
import { createHash } from 'node:crypto'
import { open } from 'node:fs/promises'
import { DataError, IoError } from '../errors.js'
import type { FingerprintCheckOptions, LedgerEntry, StatFile } from '../plan/files.js'
import { filesToFingerprint } from '../plan/files.js'
import type { FileKind } from '../types.js'

/** Bytes hashed at each end of an Arrow IPC file. */
export const ipcEdgeBytes = 64 * 1024

/** What `fingerprint` needs to know about a file (a `SourceFile` fits). */
export interface FingerprintInput {
  readonly path: string
  /** Size in bytes from the same stat the ledger records. */
  readonly size: number
  readonly kind: FileKind
}

/**
 * Hex SHA-256 fingerprint of a file's content, read cheaply.
 *
 * - Parquet: the last 8 bytes are the footer length (u32 little-endian) and the magic `PAR1`
 *   (`PARE` for encrypted footers). The hash covers the size, the footer (file metadata: schema,
 *   row-group offsets and sizes, column statistics, writer) and the magic. Any rewrite that changes
 *   the row count, a column chunk's size or offset, or a min/max statistic changes the footer.
 * - Arrow IPC (file and stream): the size plus the first and the last 64 KiB (the whole file when it
 *   is at most 128 KiB). The IPC file footer (schema, record-batch offsets) is at the tail; an
 *   appended stream changes the size and the tail.
 *
 * Not covered: a same-size rewrite that changes only bytes in the middle of the file and leaves the
 * footer identical (Parquet without statistics and with identical compressed sizes; IPC bytes more
 * than 64 KiB from both ends). Writers of our inputs always write a new footer, so this is accepted.
 *
 * The size is the one the caller stat'ed; a file that shrank below it since then fails with an
 * IoError, which the next run retries. Take the fingerprint before reading the rows: if the file is
 * rewritten during the read, the ledger holds the older fingerprint and the next run re-reads it.
 *
 * @throws DataError when a Parquet file is too short, lacks the magic, or its footer length is impossible.
 * @throws IoError when the file cannot be opened or read.
 */
export async function fingerprint(file: FingerprintInput): Promise<string> {
  const hash = createHash('sha256')
  hash.update(`${file.kind}\u0000${file.size}\u0000`)
  let handle: Awaited<ReturnType<typeof open>>
  try {
    handle = await open(file.path, 'r')
  } catch (cause) {
    throw new IoError(`cannot open ${file.path} to fingerprint it; check that it exists and is readable`, {
      context: { file: file.path },
      cause,
    })
  }
  try {
    if (file.kind === 'parquet') {
      if (file.size < 12) {
        throw new DataError(`${file.path} is ${file.size} bytes, too short for a Parquet file (needs ≥ 12)`, {
          context: { file: file.path },
        })
      }
      const tail = await readExactly(handle, file.path, file.size - 8, 8)
      const magic = tail.toString('latin1', 4, 8)
      if (magic !== 'PAR1' && magic !== 'PARE') {
        throw new DataError(`${file.path} does not end with the Parquet magic PAR1 (found ${JSON.stringify(magic)})`, {
          context: { file: file.path },
        })
      }
      const footerLength = tail.readUInt32LE(0)
      if (footerLength > file.size - 12) {
        throw new DataError(
          `${file.path}: Parquet footer length ${footerLength} exceeds the file size ${file.size}; the file is truncated`,
          { context: { file: file.path } },
        )
      }
      hash.update(await readExactly(handle, file.path, file.size - 8 - footerLength, footerLength))
      hash.update(tail)
    } else if (file.size <= 2 * ipcEdgeBytes) {
      hash.update(await readExactly(handle, file.path, 0, file.size))
    } else {
      hash.update(await readExactly(handle, file.path, 0, ipcEdgeBytes))
      hash.update(await readExactly(handle, file.path, file.size - ipcEdgeBytes, ipcEdgeBytes))
    }
  } finally {
    await handle.close()
  }
  return hash.digest('hex')
}

/**
 * Fingerprints exactly the files `filesToFingerprint` selects (new files, stat-mismatched files, and
 * every ledger file when `verify`), with at most `concurrency` files open at once. Returns path →
 * fingerprint, ready for `planFiles`. Files not selected are left to the stat pre-check
 * (`isStatUnchanged`: equal size and mtime mean unchanged, read nothing).
 */
export async function fingerprintFiles(
  discovered: readonly (StatFile & FingerprintInput)[],
  ledger: readonly LedgerEntry[],
  options: FingerprintCheckOptions & { readonly concurrency?: number } = {},
): Promise<Map<string, string>> {
  const wanted = new Set(filesToFingerprint(discovered, ledger, options))
  const todo = discovered.filter((f) => wanted.has(f.path))
  const out = new Map<string, string>()
  let next = 0
  const worker = async (): Promise<void> => {
    for (let i = next++; i < todo.length; i = next++) {
      const f = todo[i]
      if (f !== undefined) out.set(f.path, await fingerprint(f))
    }
  }
  const lanes = Math.max(1, Math.min(options.concurrency ?? 8, todo.length))
  await Promise.all(Array.from({ length: lanes }, worker))
  return out
}

async function readExactly(
  handle: Awaited<ReturnType<typeof open>>,
  path: string,
  position: number,
  length: number,
): Promise<Buffer> {
  const buf = Buffer.alloc(length)
  let done = 0
  while (done < length) {
    const { bytesRead } = await handle.read(buf, done, length - done, position + done)
    if (bytesRead === 0) {
      throw new IoError(
        `${path} ended at byte ${position + done} while fingerprinting (expected ${position + length}); it changed during the run, rerun`,
        { context: { file: path } },
      )
    }
    done += bytesRead
  }
  return buf
}
