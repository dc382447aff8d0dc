/** A one-line progress bar for terminals, redrawn in place at most every 100 ms. */

export interface ProgressLine {
  update(text: string, share: number): void;
  /** Clear the bar so normal lines can follow. */
  clear(): void;
}

const WIDTH = 24;
const REDRAW_MS = 100;

export function progressLine(write: (text: string) => void, enabled: boolean): ProgressLine {
  let last = 0;
  let drawn = false;
  return {
    update(text, share) {
      if (!enabled) return;
      const now = Date.now();
      if (now - last < REDRAW_MS && share < 1) return;
      last = now;
      const filled = Math.round(Math.min(1, Math.max(0, share)) * WIDTH);
      write(`\r\x1b[2K[${'#'.repeat(filled)}${'.'.repeat(WIDTH - filled)}] ${text}`);
      drawn = true;
    },
    clear() {
      if (enabled && drawn) write('\r\x1b[2K');
      drawn = false;
    },
  };
}
