/**
 * `--order spread`: the order of classes inside a part, chosen so that every class is spread
 * evenly through it. Pure: it decides which class fills each position, from the part's class
 * counts alone; which record of that class goes there is the next one in shuffled order.
 *
 * The guarantee. For a part of n records with n_c of class c (share p_c = n_c / n), after the
 * first t records every class has been given within one record of its share:
 *
 *     t·p_c − 1 < C_c(t) < t·p_c + 1      for every t and c,
 *
 * so every window of w consecutive records holds each class strictly within two records of
 * w·p_c. Equivalently, the j-th record of class c (j = 1 … n_c) must sit at a position t with
 *
 *     ⌊(j − 1)·n / n_c⌋ + 1  ≤  t  ≤  ⌈j·n / n_c⌉          (its release and its deadline).
 *
 * How. Every (class, j) is a unit of work with that release and deadline, one position per step;
 * the positions are filled in order, each with the released unit of the earliest deadline (ties
 * by class order). Earliest deadline first meets every deadline whenever any order does (the
 * classic exchange argument for unit jobs with release times), and an order meeting these bounds
 * exists for any shares: Tijdeman's solution of the chairman assignment problem keeps every
 * |C_c(t) − t·p_c| ≤ 1 − 1/(2(k − 1)) for k classes (R. Tijdeman, 1980; from memory). The checker
 * below tests the bounds, and `rowdeck verify` uses it on every part written in this order.
 *
 * Releases and deadlines are kept as exact quotients of j·n by n_c, advanced by whole steps, so
 * parts of any size stay exact in floating point (every value stays below 2^53).
 */

/** j·n / n_c as an exact quotient and remainder, advanced one j at a time. */
interface Quotient {
  /** ⌊j·n / n_c⌋ */
  q: number;
  /** j·n − q·n_c, in [0, n_c) */
  r: number;
}

function step(x: Quotient, n: number, nc: number): void {
  x.q += Math.floor(n / nc);
  x.r += n % nc;
  if (x.r >= nc) {
    x.q++;
    x.r -= nc;
  }
}

/** A binary min-heap of class ids by a key per class, ties by class id. */
class Heap {
  readonly #ids: number[] = [];
  readonly #key: Float64Array;
  constructor(key: Float64Array) {
    this.#key = key;
  }
  get size(): number {
    return this.#ids.length;
  }
  #less(a: number, b: number): boolean {
    const ka = this.#key[a]!;
    const kb = this.#key[b]!;
    return ka < kb || (ka === kb && a < b);
  }
  peek(): number {
    return this.#ids[0]!;
  }
  push(id: number): void {
    const h = this.#ids;
    h.push(id);
    let i = h.length - 1;
    while (i > 0) {
      const up = (i - 1) >> 1;
      if (!this.#less(h[i]!, h[up]!)) break;
      [h[i], h[up]] = [h[up]!, h[i]!];
      i = up;
    }
  }
  pop(): number {
    const h = this.#ids;
    const top = h[0]!;
    const last = h.pop()!;
    if (h.length > 0) {
      h[0] = last;
      let i = 0;
      for (;;) {
        const l = 2 * i + 1;
        const r = l + 1;
        let m = i;
        if (l < h.length && this.#less(h[l]!, h[m]!)) m = l;
        if (r < h.length && this.#less(h[r]!, h[m]!)) m = r;
        if (m === i) break;
        [h[i], h[m]] = [h[m]!, h[i]!];
        i = m;
      }
    }
    return top;
  }
}

/**
 * The classes of a spread part, position by position. `counts[c]` records of class c; classes
 * with no records never come. Class order breaks ties (callers pass classes in a seeded order).
 */
export class SpreadOrder {
  readonly #counts: number[];
  readonly #n: number;
  readonly #given: Float64Array;
  /** Per class: ⌊(j − 1)·n / n_c⌋ for its next record j (its release is this + 1). */
  readonly #before: Quotient[];
  /** Per class: j·n / n_c for its next record j (its deadline is the ceiling). */
  readonly #at: Quotient[];
  readonly #release: Float64Array;
  readonly #deadline: Float64Array;
  readonly #waiting: Heap;
  readonly #ready: Heap;
  #t = 0;

  constructor(counts: ArrayLike<number>) {
    this.#counts = Array.from(counts);
    const k = this.#counts.length;
    this.#n = this.#counts.reduce((a, b) => a + b, 0);
    this.#given = new Float64Array(k);
    this.#release = new Float64Array(k);
    this.#deadline = new Float64Array(k);
    this.#waiting = new Heap(this.#release);
    this.#ready = new Heap(this.#deadline);
    this.#before = this.#counts.map(() => ({ q: 0, r: 0 }));
    this.#at = this.#counts.map(() => ({ q: 0, r: 0 }));
    for (let c = 0; c < k; c++) {
      if (this.#counts[c]! === 0) continue;
      step(this.#at[c]!, this.#n, this.#counts[c]!);
      this.#schedule(c);
    }
  }

  /** Release and deadline of class c's next record, and the heap it waits in. */
  #schedule(c: number): void {
    const a = this.#at[c]!;
    this.#release[c] = this.#before[c]!.q + 1;
    this.#deadline[c] = a.q + (a.r > 0 ? 1 : 0);
    if (this.#release[c]! <= this.#t + 1) this.#ready.push(c);
    else this.#waiting.push(c);
  }

  /** Records placed so far. */
  get placed(): number {
    return this.#t;
  }

  /** The class of the next position (1-based position `placed + 1`); -1 once every record is placed. */
  next(): number {
    if (this.#t >= this.#n) return -1;
    const t = ++this.#t;
    while (this.#waiting.size > 0 && this.#release[this.#waiting.peek()]! <= t) this.#ready.push(this.#waiting.pop());
    // Never empty: by position t, Σ_c ⌈t·n_c / n⌉ ≥ t records are released, and t − 1 are placed.
    const c = this.#ready.size > 0 ? this.#ready.pop() : this.#waiting.pop();
    const j = ++this.#given[c]!;
    if (j < this.#counts[c]!) {
      const nc = this.#counts[c]!;
      step(this.#before[c]!, this.#n, nc);
      step(this.#at[c]!, this.#n, nc);
      this.#schedule(c);
    }
    return c;
  }
}

/**
 * Checks a part's class sequence against the spread guarantee, record by record: the j-th record
 * of class c must lie between its release and its deadline (see the module's comment).
 */
export class SpreadCheck {
  readonly #counts: number[];
  readonly #n: number;
  readonly #seen: Float64Array;
  #t = 0;
  /** The first record out of its bounds: its position, class, and the bounds. */
  failure: { position: number; stratum: number; nth: number; earliest: number; latest: number } | null = null;

  constructor(counts: ArrayLike<number>) {
    this.#counts = Array.from(counts);
    this.#n = this.#counts.reduce((a, b) => a + b, 0);
    this.#seen = new Float64Array(this.#counts.length);
  }

  /** The next record is of class `c`. */
  add(c: number): void {
    const t = ++this.#t;
    const j = ++this.#seen[c]!;
    if (this.failure) return;
    const nc = this.#counts[c] ?? 0;
    if (j > nc) {
      this.failure = { position: t, stratum: c, nth: j, earliest: Infinity, latest: -Infinity };
      return;
    }
    const earliest = floorOfProduct(j - 1, this.#n, nc) + 1;
    const latest = ceilOfProduct(j, this.#n, nc);
    if (t < earliest || t > latest) this.failure = { position: t, stratum: c, nth: j, earliest, latest };
  }
}

/** ⌊x·y / d⌋ for whole numbers, exact also where x·y passes 2^53. */
function floorOfProduct(x: number, y: number, d: number): number {
  const p = x * y;
  if (Number.isSafeInteger(p)) return Math.floor(p / d);
  return Number((BigInt(x) * BigInt(y)) / BigInt(d));
}

/** ⌈x·y / d⌉ for whole numbers. */
function ceilOfProduct(x: number, y: number, d: number): number {
  const p = x * y;
  if (Number.isSafeInteger(p)) return Math.ceil(p / d);
  const b = BigInt(x) * BigInt(y);
  const q = b / BigInt(d);
  return Number(q * BigInt(d) === b ? q : q + 1n);
}
