/**
 * A real node:http server on port 0 for webhook tests: it records every request (method, path,
 * headers, raw body) and answers from a script, one step per request; the last step repeats.
 * A `hang` step never answers (the socket is destroyed on close), to exercise client timeouts.
 */
import { createServer, type IncomingHttpHeaders } from 'node:http'
import type { Socket } from 'node:net'

/** One scripted answer. */
export type ScriptStep =
  | { readonly status: number; readonly headers?: Readonly<Record<string, string>>; readonly body?: string }
  | { readonly hang: true }

/** A request as the server received it. */
export interface RecordedRequest {
  readonly method: string
  readonly path: string
  readonly headers: IncomingHttpHeaders
  /** Raw body, decoded as UTF-8. */
  readonly body: string
}

export interface TestServer {
  /** `http://127.0.0.1:<port>/hook` (the path is part of the URL a test configures). */
  readonly url: string
  readonly requests: readonly RecordedRequest[]
  close(): Promise<void>
}

/** Starts a server answering `script` (default: 200 forever). */
export async function startServer(script: readonly ScriptStep[] = [{ status: 200 }]): Promise<TestServer> {
  const requests: RecordedRequest[] = []
  const sockets = new Set<Socket>()
  const server = createServer((req, res) => {
    const chunks: Buffer[] = []
    req.on('data', (c: Buffer) => chunks.push(c))
    req.on('end', () => {
      const step = script[Math.min(requests.length, script.length - 1)] ?? { status: 200 }
      requests.push({
        method: req.method ?? '',
        path: req.url ?? '',
        headers: req.headers,
        body: Buffer.concat(chunks).toString('utf8'),
      })
      if ('hang' in step) return
      res.writeHead(step.status, { 'content-type': 'text/plain', ...step.headers })
      res.end(step.body ?? '')
    })
  })
  server.on('connection', (s: Socket) => {
    sockets.add(s)
    s.on('close', () => sockets.delete(s))
  })
  await new Promise<void>((resolve) => server.listen(0, '127.0.0.1', resolve))
  const address = server.address()
  if (address === null || typeof address === 'string') throw new Error('server has no port')
  return {
    url: `http://127.0.0.1:${address.port}/hook`,
    requests,
    close: () =>
      new Promise<void>((resolve, reject) => {
        for (const s of sockets) s.destroy()
        server.close((err) => (err === undefined ? resolve() : reject(err)))
      }),
  }
}
