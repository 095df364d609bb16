/**
 * Interns key values to small integer ids without building a JS string per row. UTF-8 byte ranges
 * (Arrow Utf8 columns: an offsets array plus one byte buffer) are hashed (FNV-1a) into an
 * open-addressing table and compared byte by byte; the string is decoded once, when a key is first
 * seen. Other values (numbers, bigints) go through a Map. Pure: no I/O.
 */

const decoder = new TextDecoder()

/** Distinct byte strings → dense ids 0, 1, 2, … in order of first sight. */
export class ByteKeyTable {
  private pool = new Uint8Array(1024)
  private poolUsed = 0
  private starts: number[] = []
  private hashes: number[] = []
  private table = new Int32Array(64).fill(-1)
  private readonly texts: string[] = []

  /** Number of distinct keys. */
  get size(): number {
    return this.texts.length
  }

  /** The text of key `id`. */
  text(id: number): string {
    const t = this.texts[id]
    if (t === undefined) throw new RangeError(`no key with id ${id}`)
    return t
  }

  /** The id of the bytes `bytes[start … end)`, added when new. */
  idOf(bytes: Uint8Array, start: number, end: number): number {
    let h = 0x811c9dc5
    for (let i = start; i < end; i++) h = Math.imul(h ^ (bytes[i] as number), 0x01000193)
    h >>>= 0
    const mask = this.table.length - 1
    let pos = h & mask
    for (;;) {
      const id = this.table[pos] as number
      if (id < 0) break
      if (this.hashes[id] === h && this.equals(id, bytes, start, end)) return id
      pos = (pos + 1) & mask
    }
    const id = this.texts.length
    this.append(bytes, start, end)
    this.hashes.push(h)
    this.texts.push(decoder.decode(bytes.subarray(start, end)))
    this.table[pos] = id
    if (this.texts.length * 2 > this.table.length) this.rehash()
    return id
  }

  private equals(id: number, bytes: Uint8Array, start: number, end: number): boolean {
    const a = this.starts[id] as number
    const b = id + 1 < this.starts.length ? (this.starts[id + 1] as number) : this.poolUsed
    if (b - a !== end - start) return false
    for (let i = 0; i < b - a; i++) if (this.pool[a + i] !== bytes[start + i]) return false
    return true
  }

  private append(bytes: Uint8Array, start: number, end: number): void {
    const len = end - start
    if (this.poolUsed + len > this.pool.length) {
      const next = new Uint8Array(Math.max(this.pool.length * 2, this.poolUsed + len))
      next.set(this.pool.subarray(0, this.poolUsed))
      this.pool = next
    }
    this.pool.set(bytes.subarray(start, end), this.poolUsed)
    this.starts.push(this.poolUsed)
    this.poolUsed += len
  }

  private rehash(): void {
    const table = new Int32Array(this.table.length * 2).fill(-1)
    const mask = table.length - 1
    for (let id = 0; id < this.hashes.length; id++) {
      let pos = (this.hashes[id] as number) & mask
      while ((table[pos] as number) >= 0) pos = (pos + 1) & mask
      table[pos] = id
    }
    this.table = table
  }
}

/**
 * Dense ids for the values of one key column, whatever their Arrow type: text values from Utf8
 * bytes, dictionaries or `String(v)` of numbers and bigints, plus null. Ids are shared across all
 * batches of a file, so the same value always gets the same id.
 */
export class KeyValueIds {
  readonly bytes = new ByteKeyTable()
  private readonly byText = new Map<string, number>()
  private readonly values: (string | null)[] = []
  private nullId = -1
  /** Maps ByteKeyTable ids to value ids. */
  private byteToValue = new Int32Array(64).fill(-1)

  /** Number of distinct values (null included once seen). */
  get size(): number {
    return this.values.length
  }

  /** The value of id `id` (a string, or null). */
  value(id: number): string | null {
    const v = this.values[id]
    if (v === undefined) throw new RangeError(`no key value with id ${id}`)
    return v
  }

  /** Id of null. */
  idOfNull(): number {
    if (this.nullId < 0) {
      this.nullId = this.values.length
      this.values.push(null)
    }
    return this.nullId
  }

  /** Id of a text value. */
  idOfText(text: string): number {
    let id = this.byText.get(text)
    if (id === undefined) {
      id = this.values.length
      this.values.push(text)
      this.byText.set(text, id)
    }
    return id
  }

  /** Id of the UTF-8 bytes `bytes[start … end)`: hashed on the bytes, decoded only when new. */
  idOfBytes(bytes: Uint8Array, start: number, end: number): number {
    const b = this.bytes.idOf(bytes, start, end)
    if (b >= this.byteToValue.length) {
      const next = new Int32Array(this.byteToValue.length * 2).fill(-1)
      next.set(this.byteToValue)
      this.byteToValue = next
    }
    let id = this.byteToValue[b] as number
    if (id < 0) {
      id = this.idOfText(this.bytes.text(b))
      this.byteToValue[b] = id
    }
    return id
  }
}
