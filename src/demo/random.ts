/** Seeded pseudo-random numbers for invented demo and property-test data (mulberry32 + Box–Muller). */

/** A deterministic uniform [0, 1) generator from a 32-bit seed (mulberry32). */
export function uniformRng(seed: number): () => number {
  let a = seed >>> 0
  return () => {
    a = (a + 0x6d2b79f5) >>> 0
    let t = a
    t = Math.imul(t ^ (t >>> 15), t | 1)
    t ^= t + Math.imul(t ^ (t >>> 7), t | 61)
    return ((t ^ (t >>> 14)) >>> 0) / 4294967296
  }
}

/** Standard normal draws by Box–Muller from any uniform [0, 1) generator. */
export function normalsFrom(uniform: () => number): () => number {
  let spare: number | null = null
  return () => {
    if (spare !== null) {
      const s = spare
      spare = null
      return s
    }
    let a = 0
    while (a === 0) a = uniform()
    const b = uniform()
    const r = Math.sqrt(-2 * Math.log(a))
    spare = r * Math.sin(2 * Math.PI * b)
    return r * Math.cos(2 * Math.PI * b)
  }
}

/** A deterministic standard-normal generator from a 32-bit seed. */
export function normalRng(seed: number): () => number {
  return normalsFrom(uniformRng(seed))
}
