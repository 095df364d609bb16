/** Seeded pseudo-random numbers for invented test data (property and unit tests): the demo's generators. */
export { normalsFrom as normals, uniformRng as mulberry32 } from '../../src/demo/random.js'
