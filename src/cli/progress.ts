/**
 * A progress line on stderr for work longer than a second: percentage, rate
 * and time left. On a terminal it rewrites one line; otherwise it prints a
 * line at most every five seconds.
 */
export class Progress {
  private readonly start = Date.now();
  private lastPrint = 0;
  private printed = false;
  constructor(private readonly label: string, private readonly unit: string, private readonly quiet = false) {}

  update(done: number, total: number, work?: number): void {
    if (this.quiet) return;
    const now = Date.now();
    const el = (now - this.start) / 1000;
    if (el < 1) return;
    const tty = process.stderr.isTTY;
    if (done < total && now - this.lastPrint < (tty ? 200 : 5000)) return;
    this.lastPrint = now;
    const frac = total > 0 ? done / total : 1;
    const left = frac > 0 ? (el * (1 - frac)) / frac : 0;
    const rate = work !== undefined ? `, ${fmtRate(work / el)} ${this.unit}/s` : "";
    const line = `${this.label}: ${(frac * 100).toFixed(0)}% (${done}/${total})${rate}, ${el.toFixed(1)} s elapsed, ${left.toFixed(1)} s left`;
    if (tty) process.stderr.write(`\r${line}\x1b[K`);
    else process.stderr.write(line + "\n");
    this.printed = true;
  }

  done(): void {
    if (this.printed && process.stderr.isTTY) process.stderr.write("\n");
  }
}

function fmtRate(r: number): string {
  if (r >= 1e9) return `${(r / 1e9).toFixed(2)} G`;
  if (r >= 1e6) return `${(r / 1e6).toFixed(1)} M`;
  if (r >= 1e3) return `${(r / 1e3).toFixed(1)} k`;
  return r.toFixed(0);
}
