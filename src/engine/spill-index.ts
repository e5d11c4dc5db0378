/**
 * Where every bucket's records lie once stage 1 is done: the chunks of all scatter tasks, in
 * typed arrays grouped by bucket (task order, then the order they were written), and the files
 * and slabs they are in. Stage 2 asks it for one bucket's pieces at a time, so no object is made
 * per chunk until its bucket is dealt (hundreds of thousands of chunks at 8 GB and a small
 * budget: a SpillPiece each, held to the end, was most of the memory that grew with the input).
 */
import { CHUNK_FIELDS, IN_FILE, IN_RAM_FILE, spillRanges, type SpillPiece } from './spill.js';

/** One writer's chunks, as a scatter task (or a split, see split.ts) hands them over. */
export interface ChunkSource {
  /** Its files, one per range of buckets. */
  paths: string[];
  /** CHUNK_FIELDS numbers a chunk: bucket, place (IN_FILE, IN_RAM_FILE or a slab), offset, length. */
  chunks: Float64Array;
  slabs: SharedArrayBuffer[];
  /** Its files in memory, one per range (the memory layout); absent or empty: none. */
  ramFiles?: number[];
}

export class SpillIndex {
  readonly buckets: number;
  /** Spill bytes of each bucket. */
  readonly bytes: Float64Array;
  readonly #perRange: number;
  /** Bucket b's chunks are entries start[b] up to start[b + 1]. */
  readonly #start: Uint32Array;
  readonly #source: Int32Array;
  readonly #place: Int32Array;
  readonly #offset: Float64Array;
  readonly #length: Float64Array;
  readonly #paths: string[][];
  readonly #ramFiles: number[][];
  readonly #slabs: (SharedArrayBuffer | null)[][];
  readonly #onRelease: ((range: number) => void) | null;
  /** Pieces name this task (-1: their strata are dealing strata already). */
  readonly #taskOf: (source: number) => number;

  /**
   * The chunks of `sources` (in order) over `buckets` buckets. `taskOf` gives the scatter task a
   * source's pieces are read as (default: its index).
   */
  constructor(sources: ChunkSource[], buckets: number, taskOf: (source: number) => number = (s) => s, onRelease: ((range: number) => void) | null = null) {
    this.buckets = buckets;
    this.#perRange = spillRanges(buckets).perRange;
    this.#taskOf = taskOf;
    this.#onRelease = onRelease;
    this.#paths = sources.map((s) => s.paths);
    this.#ramFiles = sources.map((s) => s.ramFiles ?? []);
    this.#slabs = sources.map((s) => [...s.slabs]);
    let total = 0;
    for (const s of sources) total += s.chunks.length / CHUNK_FIELDS;
    const start = new Uint32Array(buckets + 1);
    for (const s of sources) for (let k = 0; k < s.chunks.length; k += CHUNK_FIELDS) start[s.chunks[k]! + 1]!++;
    for (let b = 0; b < buckets; b++) start[b + 1]! += start[b]!;
    this.#start = start;
    this.#source = new Int32Array(total);
    this.#place = new Int32Array(total);
    this.#offset = new Float64Array(total);
    this.#length = new Float64Array(total);
    this.bytes = new Float64Array(buckets);
    const next = start.slice(0, buckets);
    sources.forEach((s, t) => {
      const c = s.chunks;
      for (let k = 0; k < c.length; k += CHUNK_FIELDS) {
        const b = c[k]!;
        const at = next[b]!++;
        this.#source[at] = t;
        this.#place[at] = c[k + 1]!;
        this.#offset[at] = c[k + 2]!;
        this.#length[at] = c[k + 3]!;
        this.bytes[b]! += c[k + 3]!;
      }
    });
  }

  /** Chunks in all. */
  get chunkCount(): number {
    return this.#source.length;
  }

  /** Bytes held in slabs of memory, and in files. */
  placement(): { memory: number; files: number } {
    let memory = 0;
    let files = 0;
    for (let k = 0; k < this.#place.length; k++) {
      if (this.#place[k]! === IN_FILE) files += this.#length[k]!;
      else memory += this.#length[k]!;
    }
    return { memory, files };
  }

  /** Bucket b's pieces. */
  pieces(b: number): SpillPiece[] {
    const range = Math.floor(b / this.#perRange);
    const out: SpillPiece[] = [];
    for (let k = this.#start[b]!; k < this.#start[b + 1]!; k++) {
      const s = this.#source[k]!;
      const place = this.#place[k]!;
      const piece: SpillPiece = { task: this.#taskOf(s), path: place === IN_FILE ? this.#paths[s]![range]! : '', offset: this.#offset[k]!, length: this.#length[k]! };
      if (place === IN_RAM_FILE) piece.fd = this.#ramFiles[s]![range]!;
      else if (place >= 0) {
        const slab = this.#slabs[s]![place];
        if (!slab) throw new Error(`internal: bucket ${b} read after its range's memory was let go`);
        piece.memory = slab;
      }
      out.push(piece);
    }
    return out;
  }

  /** Every source's file of range `r` (some may not exist: a range without a chunk in a file). */
  rangeFiles(r: number): string[] {
    return this.#paths.map((p) => p[r]!).filter((p) => p !== undefined);
  }

  /**
   * Lets go of the memory that holds range r's chunks (stage 2 has passed it): its files in
   * memory are closed (by `onRelease`), its slabs freed once no thread holds them.
   */
  releaseRange(r: number): void {
    this.#onRelease?.(r);
    const first = r * this.#perRange;
    const end = Math.min(this.buckets, first + this.#perRange);
    for (let k = this.#start[first]!; k < this.#start[end]!; k++) {
      const place = this.#place[k]!;
      if (place >= 0) this.#slabs[this.#source[k]!]![place] = null;
    }
  }
}
