/**
 * Byte-keyed lookup: finds the id of a short byte string (a class value) without making a
 * string per record. Open addressing over copies of the key bytes, FNV-1a hashing.
 *
 * `lookup` first compares the bytes with the last key it found: inputs come sorted or clustered
 * by class, so most records repeat the previous one's value, and a comparison of a few bytes is
 * cheaper than hashing them and probing (stage 1's task: ~140 fewer instructions a record on the
 * benchmark file, see docs/benchmarks.md).
 */
/** Keys up to this many bytes go through the table; callers look longer values up by their text. */
export const BYTE_KEY_LIMIT = 64;

export class ByteIdTable {
  #last = new Uint8Array(64);
  #lastLen = -1;
  #lastId = -1;
  #mask = 255;
  #hashes = new Int32Array(256);
  #ids = new Int32Array(256).fill(-1);
  #keys: (Buffer | undefined)[] = new Array(256);
  #size = 0;

  static #hash(d: Uint8Array, s: number, e: number): number {
    let h = 0x811c9dc5 | 0;
    for (let i = s; i < e; i++) h = Math.imul(h ^ d[i]!, 0x01000193);
    return h;
  }

  /** The id of d[s, e), or -1 (then `insert` may follow). */
  lookup(d: Uint8Array, s: number, e: number): number {
    const len = e - s;
    if (len === this.#lastLen) {
      const last = this.#last;
      let q = 0;
      while (q < len && last[q] === d[s + q]) q++;
      if (q === len) return this.#lastId;
    }
    const id = this.#find(d, s, e, ByteIdTable.#hash(d, s, e));
    if (id >= 0) this.#remember(d, s, len, id);
    return id;
  }

  /** Stores d[s, e), which `lookup` did not find, under `id`. */
  insert(d: Uint8Array, s: number, e: number, id: number): void {
    this.#add(d, s, e, ByteIdTable.#hash(d, s, e), id);
    this.#remember(d, s, e - s, id);
  }

  #remember(d: Uint8Array, s: number, len: number, id: number): void {
    if (this.#last.length < len) this.#last = new Uint8Array(len * 2);
    const last = this.#last;
    for (let q = 0; q < len; q++) last[q] = d[s + q]!;
    this.#lastLen = len;
    this.#lastId = id;
  }

  /** Number of keys. */
  get size(): number {
    return this.#size;
  }

  /** The id of d[s, e) (with hash h from `#hash`), or -1. */
  #find(d: Uint8Array, s: number, e: number, h: number): number {
    const len = e - s;
    for (let slot = h & this.#mask; ; slot = (slot + 1) & this.#mask) {
      const id = this.#ids[slot]!;
      if (id < 0) return -1;
      if (this.#hashes[slot] !== h) continue;
      const k = this.#keys[slot]!;
      if (k.length !== len) continue;
      let same = true;
      for (let i = 0; i < len; i++) {
        if (k[i] !== d[s + i]) {
          same = false;
          break;
        }
      }
      if (same) return id;
    }
  }

  /** Stores d[s, e) (hash h) under `id`. */
  #add(d: Uint8Array, s: number, e: number, h: number, id: number): void {
    if ((this.#size + 1) * 2 > this.#mask) this.#grow();
    let slot = h & this.#mask;
    while (this.#ids[slot]! >= 0) slot = (slot + 1) & this.#mask;
    this.#ids[slot] = id;
    this.#hashes[slot] = h;
    this.#keys[slot] = Buffer.from(d.subarray(s, e));
    this.#size++;
  }

  #grow(): void {
    const ids = this.#ids;
    const hashes = this.#hashes;
    const keys = this.#keys;
    const cap = (this.#mask + 1) * 2;
    this.#mask = cap - 1;
    this.#ids = new Int32Array(cap).fill(-1);
    this.#hashes = new Int32Array(cap);
    this.#keys = new Array(cap);
    for (let slot = 0; slot < ids.length; slot++) {
      if (ids[slot]! < 0) continue;
      let t = hashes[slot]! & this.#mask;
      while (this.#ids[t]! >= 0) t = (t + 1) & this.#mask;
      this.#ids[t] = ids[slot]!;
      this.#hashes[t] = hashes[slot]!;
      this.#keys[t] = keys[slot];
    }
  }
}
