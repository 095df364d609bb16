/**
 * Fast path of the table writers' value checks: one pass over the row objects that checks and gathers every column
 * at once (row-major), compiled once per column layout.
 *
 * Why compiled: the writers read ~40 named fields of each of ~50,000 row objects per run. A loop over column names
 * reading `row[name]` goes through one megamorphic property site, and a column-by-column pass re-reads every row
 * object once per column (the rows do not fit in the CPU caches); measured for 24,000 fits rows (V8 in Node 20):
 * ~20 ms column by column, ~2 ms with a function whose property names are written out, one row at a time. The names
 * are embedded as JSON string literals, so any name is safe, and the generated code only reads and compares values.
 *
 * The generated loop keeps rare work out of line, since it runs once per run on cold JIT (interpreted until V8
 * compiles it mid-loop): a nullable column's null mask is allocated up front (and dropped when no row is null)
 * rather than on its first null, and a new dictionary string is added by a helper. The function is named
 * `gatherRows`, so it shows by name in CPU profiles.
 *
 * The fast path accepts a value only when the shared check (`valueCheck` of columns.ts) does; the test
 * test/unit/tables/gather.test.ts holds the two to the same answers. On the first row it refuses, it returns null and
 * the writer runs its checked path, which finds the first bad value in its own order and names it.
 */

import type { GatheredColumn } from './columnar.js'
import type { ColumnType } from './columns.js'

/** One column for {@link compileGatherer}: where each row holds it and what it may hold. */
export interface GatherColumn {
  /** Published name of the column (also the field name of a `field` column). */
  readonly name: string
  readonly type: ColumnType
  readonly nullable: boolean
  /** `field`: the row's property `name`; `key`: item `keyIndex` of the row's `key` array. */
  readonly source: 'field' | 'key'
  readonly keyIndex?: number
  /** VARCHAR only: the values the column may hold (any string when absent). */
  readonly values?: readonly string[]
}

/** Gathers all columns of `rows`, or returns null at the first row that is not an object or holds a refused value. */
export type Gatherer = (rows: readonly unknown[]) => GatheredColumn[] | null

/** Largest epoch ms a JS Date (and TIMESTAMPTZ here) holds: ±8.64e15 ms, as in valueCheck. */
const maxDateMs = 8.64e15

/**
 * A {@link Gatherer} for `columns` and rows whose `key` array has `keyLength` items (fits, shifts; 0 and no key
 * check for runs). Compiled on first use of a layout and cached.
 */
export function compileGatherer(columns: readonly GatherColumn[], keyLength: number | null): Gatherer {
  const signature = JSON.stringify([columns, keyLength])
  let gatherer = gatherers.get(signature)
  if (gatherer === undefined) {
    gatherer = build(columns, keyLength)
    gatherers.set(signature, gatherer)
  }
  return gatherer
}

const gatherers = new Map<string, Gatherer>()

function build(columns: readonly GatherColumn[], keyLength: number | null): Gatherer {
  const declare: string[] = []
  const body: string[] = []
  const result: string[] = []
  for (const [c, column] of columns.entries()) {
    const read = column.source === 'key' ? `k[${Number(column.keyIndex)}]` : `r[${JSON.stringify(column.name)}]`
    const onNull = column.nullable ? `else if (v === null) { z${c}[i] = 1; h${c} = true }` : ''
    declare.push(column.nullable ? `const z${c} = new Uint8Array(n); let h${c} = false;` : '')
    switch (column.type) {
      case 'VARCHAR':
        // `l`/`x`: the previous string and its code, since neighbouring rows mostly repeat a string.
        declare.push(`const d${c} = new Uint32Array(n), m${c} = new Map(), t${c} = []; let l${c} = null, x${c} = 0;`)
        body.push(
          `v = ${read}; if (typeof v === 'string') { if (v !== l${c}) { let x = m${c}.get(v); if (x === undefined)` +
            ` x = add(m${c}, t${c}, v); l${c} = v; x${c} = x } d${c}[i] = x${c} }` +
            ` ${onNull} else return null;`,
        )
        break
      case 'BOOLEAN':
        declare.push(`const d${c} = new Uint8Array(n);`)
        body.push(`v = ${read}; if (v === true) d${c}[i] = 1; else if (v === false) {} ${onNull} else return null;`)
        break
      case 'BIGINT':
        declare.push(`const d${c} = new Float64Array(n);`)
        body.push(`v = ${read}; if (Number.isSafeInteger(v)) d${c}[i] = v; ${onNull} else return null;`)
        break
      case 'DOUBLE':
        declare.push(`const d${c} = new Float64Array(n);`)
        body.push(`v = ${read}; if (typeof v === 'number') d${c}[i] = v; ${onNull} else return null;`)
        break
      case 'TIMESTAMPTZ':
        declare.push(`const d${c} = new Float64Array(n);`)
        body.push(
          `v = ${read}; if (typeof v === 'number' && Math.abs(v) <= ${maxDateMs}) d${c}[i] = v; ${onNull} else return null;`,
        )
        break
    }
    const dictionary = column.type === 'VARCHAR' ? `t${c}` : '[]'
    result.push(
      `{ name: ${JSON.stringify(column.name)}, type: ${JSON.stringify(column.type)}, data: d${c}, dictionary: ${dictionary}, nulls: ${column.nullable ? `h${c} ? z${c} : null` : 'null'} }`,
    )
  }
  const keyCheck =
    keyLength === null
      ? ''
      : `const k = r.key; if (!Array.isArray(k) || k.length !== ${Number(keyLength)}) return null;`
  const source =
    'function add(m, t, v) { const x = t.length; m.set(v, x); t.push(v); return x }\n' +
    `const n = rows.length; ${declare.join(' ')}\n` +
    `for (let i = 0; i < n; i++) { const r = rows[i]; if (typeof r !== 'object' || r === null) return null; ${keyCheck}` +
    ` let v;\n${body.join('\n')}\n}\nreturn [${result.join(', ')}];`
  const compiled = new Function(`return function gatherRows(rows) {\n${source}\n}`)() as (
    rows: readonly unknown[],
  ) => GatheredColumn[] | null
  const allowed = columns.map((c) => (c.type === 'VARCHAR' && c.values !== undefined ? new Set(c.values) : null))
  return (rows) => {
    const gathered = compiled(rows)
    if (gathered === null) return null
    // Closed sets of strings: checked once per distinct string.
    for (const [c, set] of allowed.entries()) {
      if (set !== null && !(gathered[c] as GatheredColumn).dictionary.every((text) => set.has(text))) return null
    }
    return gathered
  }
}
