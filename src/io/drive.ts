/**
 * How a command reads one input of several: in blocks parsed by worker lanes when it is a plain
 * file and there are lanes (io/blocks.ts), else here as a stream (stdin, gzip, a file read ahead
 * whole, or no lanes), its counts kept as it goes. Shuffle's scatter stage and profile read
 * every input with it (the small inputs they give to workers whole, io/small-inputs.ts, aside);
 * readRecords (io/input.ts) reads inputs on this thread only (quantile bins); verify and the
 * part statistics read parts with batchesOf (io/reader.ts), which every stream read ends in.
 */
import type { InputSchema, RecordBatch } from './batch.js';
import { readInBlocks, type BlockLanes } from './blocks.js';
import { isPlainFile, openInput, takeSpareReader, giveSpareReader, type SourceCounter } from './input.js';
import { batchesOf, RecordReader, type RecordReaderOptions } from './reader.js';

/** An input's counts: bytes (decompressed), records, refused records. */
export interface InputCounts {
  bytes: number;
  records: number;
  rejected: number;
}

export interface OneInput {
  path: string;
  /** The input's ordinal among the run's inputs. */
  input: number;
  reader: RecordReaderOptions;
  /** Its bytes, when they were read already (ReadAhead). */
  whole: Buffer | null;
  /** Lanes that parse a plain file in blocks; null: read here. */
  lanes: BlockLanes | null;
  blockBytes?: number;
  /** Takes every batch in input order (blocks' batches go to the lanes' own work instead). */
  send: (batch: RecordBatch, schema: InputSchema) => Promise<void>;
  onSchema?: (schema: InputSchema) => void;
  /** Kept up to date as the input is read. */
  counts: InputCounts;
  /** Bytes taken from the source so far (compressed ones for gzip: what file sizes hold). */
  onProgress: (taken: number) => void;
  /** The source already opened, with the chunks a probe took from it (profile learns the columns first). */
  opened?: { held: Buffer[]; rest: AsyncIterator<Buffer> | null; source: SourceCounter };
}

async function* chain(held: Buffer[], rest: AsyncIterator<Buffer> | null): AsyncGenerator<Buffer> {
  yield* held;
  if (!rest) return;
  for (;;) {
    const r = await rest.next();
    if (r.done) return;
    yield r.value;
  }
}

/** Reads one input (see the top of this file); its counts are final when this resolves. */
export async function readOneInput(a: OneInput): Promise<void> {
  const c = a.counts;
  if (!a.whole && a.lanes && (await isPlainFile(a.path))) {
    await a.opened?.rest?.return?.(undefined);
    const totals = await readInBlocks({
      path: a.path,
      input: a.input,
      reader: a.reader,
      lanes: a.lanes,
      ...(a.blockBytes !== undefined ? { blockBytes: a.blockBytes } : {}),
      sequential: a.send,
      ...(a.onSchema ? { onSchema: a.onSchema } : {}),
      onProgress: (bytes, records) => {
        c.bytes = bytes;
        c.records = records;
        a.onProgress(bytes);
      },
    });
    c.bytes = totals.bytes;
    c.records = totals.records;
    c.rejected = totals.rejected;
    a.onProgress(totals.bytes);
    return;
  }
  const source: SourceCounter = a.opened?.source ?? { bytes: a.whole ? a.whole.length : 0 };
  const chunks = a.opened ? chain(a.opened.held, a.opened.rest) : a.whole ? [a.whole] : openInput(a.path, source);
  const reader = new RecordReader(a.reader, takeSpareReader());
  try {
    for await (const batch of batchesOf(reader, chunks)) {
      await a.send(batch, reader.schema!);
      c.records = reader.stats.records;
      c.bytes = reader.stats.bytes;
      c.rejected = reader.stats.rejected;
      a.onProgress(source.bytes);
    }
  } finally {
    await a.opened?.rest?.return?.(undefined);
  }
  c.records = reader.stats.records;
  c.bytes = reader.stats.bytes;
  c.rejected = reader.stats.rejected;
  a.onProgress(source.bytes);
  giveSpareReader(reader);
}
