/**
 * Items handed out one at a time from a stream of batches (CSV records, text lines), so the
 * readers can look at the first row before deciding how to read the rest.
 */
import { stat } from 'node:fs/promises';
import { asDataError } from './file-errors.js';

export class BatchQueue<T> {
  private batch: T[] = [];
  private at = 0;

  /** `keep` drops items the reader skips (blank lines); every item is kept when it is left out. */
  constructor(
    private readonly batches: AsyncGenerator<T[]>,
    private readonly keep: (item: T) => boolean = () => true,
  ) {}

  /** The next kept item, or null at the end of the stream. */
  async next(): Promise<T | null> {
    for (;;) {
      while (this.at >= this.batch.length) {
        const step = await this.batches.next();
        if (step.done) return null;
        this.batch = step.value;
        this.at = 0;
      }
      const item = this.batch[this.at++];
      if (this.keep(item)) return item;
    }
  }

  /** The next kept item if it is already read, without waiting (null when a read is needed). */
  nextReady(): T | null {
    while (this.at < this.batch.length) {
      const item = this.batch[this.at++];
      if (this.keep(item)) return item;
    }
    return null;
  }

  async close(): Promise<void> {
    this.batch = [];
    await this.batches.return(undefined);
  }
}

/** Size of a data file in bytes, for progress; a missing or unreadable file is a DataError. */
export async function fileSize(path: string): Promise<number> {
  try {
    return (await stat(path)).size;
  } catch (error) {
    throw asDataError(path, error);
  }
}
