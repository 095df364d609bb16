/**
 * The status line of a terminal's stderr (`--progress`) and the log lines that share stderr with it. The status is
 * one line redrawn in place; a log line clears it, is written whole on its own line, and the status is drawn again
 * below it, so that neither cuts into the other.
 */

/** Carriage return, then erase the line: the cursor is at the start of an empty line. */
const clearLine = '\r\x1b[2K'

export class StatusLine {
  private text = ''

  /** `out` writes to the terminal at once (synchronously: a log line before an exit must not be lost). */
  constructor(private readonly out: (chunk: string) => void) {}

  /** Shows `text` as the status, replacing the one shown. */
  show(text: string): void {
    this.text = text
    this.out(`${clearLine}${text}`)
  }

  /** Removes the status. */
  clear(): void {
    if (this.text === '') return
    this.text = ''
    this.out(clearLine)
  }

  /** Writes `chunk` (whole lines, as a logger writes them) above the status. */
  write(chunk: string): void {
    this.out(this.text === '' ? chunk : `${clearLine}${chunk}${this.text}`)
  }
}
