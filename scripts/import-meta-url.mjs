// Injected into the CommonJS bundle `cli.cjs` by scripts/bundle.mjs: stands for `import.meta.url`, which a
// CommonJS script lacks. `__filename` is the bundle file under both ways launch.ts runs it.
export const importMetaUrl = require('node:url').pathToFileURL(__filename).href
