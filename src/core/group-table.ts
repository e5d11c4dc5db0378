/**
 * The groups of `--group`: for each distinct 64-bit group key, its records and their classes, in
 * typed arrays (about 20 bytes a group). A group of sessions or users may number in the
 * millions: an object and a Map per group took ~1.8 KB each, once the stage-1 tasks, the merge
 * and the placement had each made their own (3.7 GiB for the 2.15 M groups of a 200 MB file).
 *
 * The groups are counted bucket by bucket from the spill between the stages (censusBucket in
 * src/engine/census-bucket.ts): a group's records share its key, so they lie in one bucket, and the
 * buckets' lists, each in key order, are joined here in bucket order, which is key order.
 *
 * A group's records are usually of one class (the stratify column seldom varies within a
 * person or device): that class is `first[g]`, and the counts of any other classes are kept
 * aside in `extra`, so one class costs nothing more. `strataOf` lists a group's classes in
 * increasing order of id, so a placement that adds them up does the same arithmetic however the
 * records were cut up.
 */

/** One bucket's groups, as a worker thread posts them. */
export interface GroupTableData {
  count: number;
  hi: Uint32Array;
  lo: Uint32Array;
  records: Float64Array;
  first: Int32Array;
  /** [group, stratum, records, …] for the classes other than each group's first. */
  extra: Float64Array;
}

export class GroupTable {
  readonly count: number;
  readonly hi: Uint32Array;
  readonly lo: Uint32Array;
  readonly records: Float64Array;
  readonly first: Int32Array;
  /** Group -> (class other than its first -> records). */
  readonly extra = new Map<number, Map<number, number>>();

  private constructor(n: number) {
    this.count = n;
    this.hi = new Uint32Array(n);
    this.lo = new Uint32Array(n);
    this.records = new Float64Array(n);
    this.first = new Int32Array(n);
  }

  /** A list's [group, class, records] triples, its groups numbered from `base`. */
  private addExtra(base: number, extra: Float64Array): void {
    for (let j = 0; j < extra.length; j += 3) {
      const g = base + extra[j]!;
      let m = this.extra.get(g);
      if (!m) this.extra.set(g, (m = new Map()));
      m.set(extra[j + 1]!, (m.get(extra[j + 1]!) ?? 0) + extra[j + 2]!);
    }
  }

  /**
   * One table of lists of groups counted apart (no key in two of them), joined in the order
   * given: `counts[k]` groups in list k, its classes other than the first in `extras[k]`, and its
   * arrays read by `readInto` in order, list by list: hi, lo, records, first. The lists are kept
   * in a file until then (GroupTableBuilder in src/engine/group-census.ts).
   */
  static assemble(counts: readonly number[], extras: readonly Float64Array[], readInto: (bytes: Uint8Array) => void): GroupTable {
    const t = new GroupTable(counts.reduce((a, c) => a + c, 0));
    let base = 0;
    counts.forEach((c, k) => {
      for (const a of [t.hi, t.lo, t.records, t.first]) readInto(new Uint8Array(a.buffer, a.byteOffset + base * a.BYTES_PER_ELEMENT, c * a.BYTES_PER_ELEMENT));
      t.addExtra(base, extras[k]!);
      base += c;
    });
    return t;
  }

  /** Group g's classes and their records, in increasing order of class. */
  strataOf(g: number): [number, number][] {
    const m = this.extra.get(g);
    if (!m) return [[this.first[g]!, this.records[g]!]];
    let others = 0;
    for (const n of m.values()) others += n;
    const out: [number, number][] = [...m];
    if (this.records[g]! - others > 0) out.push([this.first[g]!, this.records[g]! - others]);
    return out.sort((a, b) => a[0] - b[0]);
  }
}

