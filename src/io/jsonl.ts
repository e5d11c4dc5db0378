/**
 * The JSON Lines record check in WebAssembly (src/io/jsonl.wat, made by scripts/jsonl-wasm.mjs):
 * it tells whether a line holds one JSON object, by RFC 8259's grammar as JSON.parse reads it,
 * and where the values of the wanted top-level keys lie, without building the object or a string
 * of the line. The reader (RecordReader.parseJsonl) asks it first and keeps JSON.parse for the
 * lines it refuses (for JSON.parse's message, with its position) or leaves undecided (a top-level
 * key written with escapes, nesting deeper than MAX_DEPTH). A line the check takes, JSON.parse
 * takes too: test/jsonl.test.ts compares the two on hand-made and on mutated random lines.
 *
 * One instance per reader; its memory holds the wanted keys, their answers, the container stack
 * and a copy of the bytes being read (grown to the largest such copy).
 */
import { JSONL_LAYOUT, JSONL_WASM_BASE64 } from './jsonl-wasm.js';
import { growTo, instantiate, type WasmMemory } from '../core/wasm.js';
import { flags } from '../flags.js';

type ObjectFn = (a: number, e: number, keys: number, nkeys: number, out: number, stack: number, max: number) => number;
interface JsonlKernel {
  memory: WasmMemory;
  object: ObjectFn;
}

/** i32 words of a wanted key's entry (address, length) and of its answer (start, end, kind). */
const KEY_WORDS = JSONL_LAYOUT.keyEntryBytes / 4;
const ANSWER_WORDS = JSONL_LAYOUT.answerBytes / 4;

/** Containers open at once that the module follows; deeper lines go to JSON.parse. */
export const MAX_DEPTH = 4096;

/** What `check` answers. */
export const enum JsonlCheck {
  Object = 0,
  NotObject = 1,
  Undecided = 2,
}

let enabled = flags.jsonl !== 'js';
/** For tests: use the module (true) or JSON.parse only (false) in readers created from now on. */
export function useJsonlCheck(on: boolean): void {
  enabled = on;
}

export class JsonlChecker {
  readonly #k: JsonlKernel;
  readonly #nkeys: number;
  readonly #keys: number;
  readonly #out: number;
  readonly #stack: number;
  readonly #data: number;
  /** The caller's offset of the first byte copied in. */
  #from = 0;
  #i32: Int32Array;

  /** Wanted key w -> its entry in the module's list, which holds each distinct key once. */
  readonly #entry: Int32Array;

  private constructor(k: JsonlKernel, wanted: Uint8Array[]) {
    this.#k = k;
    const keys: Uint8Array[] = [];
    const seen = new Map<string, number>();
    this.#entry = Int32Array.from(wanted, (key) => {
      const name = Buffer.from(key).toString('latin1');
      let e = seen.get(name);
      if (e === undefined) {
        seen.set(name, (e = keys.length));
        keys.push(key);
      }
      return e;
    });
    this.#nkeys = keys.length;
    this.#keys = 64;
    let at = this.#keys + JSONL_LAYOUT.keyEntryBytes * keys.length;
    const addrs: number[] = [];
    for (const key of keys) {
      addrs.push(at);
      at += key.length;
    }
    this.#out = (at + 7) & ~7;
    this.#stack = this.#out + JSONL_LAYOUT.answerBytes * keys.length;
    this.#data = (this.#stack + MAX_DEPTH + 2 + 63) & ~63;
    if (!growTo(k.memory, this.#data + 65536)) throw new Error('the JSON Lines module could not get its memory');
    const u8 = new Uint8Array(k.memory.buffer);
    this.#i32 = new Int32Array(k.memory.buffer);
    keys.forEach((key, i) => {
      u8.set(key, addrs[i]!);
      this.#i32[(this.#keys >> 2) + KEY_WORDS * i] = addrs[i]!;
      this.#i32[(this.#keys >> 2) + KEY_WORDS * i + 1] = key.length;
    });
  }

  /** A checker for these wanted keys (their UTF-8 bytes), or null where the module cannot run. */
  static create(keys: Uint8Array[]): JsonlChecker | null {
    if (!enabled) return null;
    const k = instantiate<JsonlKernel>('jsonl', JSONL_WASM_BASE64, ['memory', 'object']);
    if (!k) return null;
    try {
      return new JsonlChecker(k, keys);
    } catch {
      return null;
    }
  }

  /** Copies `d[from, to)` into the module: `check` then takes offsets of `d` in that range. False if it cannot grow. */
  load(d: Uint8Array, from: number, to: number): boolean {
    if (!growTo(this.#k.memory, this.#data + (to - from) + 64)) return false;
    new Uint8Array(this.#k.memory.buffer, this.#data, to - from).set(d.subarray(from, to));
    this.#i32 = new Int32Array(this.#k.memory.buffer);
    this.#from = from;
    return true;
  }

  /** Checks the line `d[a, e)` (within what `load` copied). */
  check(a: number, e: number): JsonlCheck {
    const delta = this.#data - this.#from;
    return this.#k.object(a + delta, e + delta, this.#keys, this.#nkeys, this.#out, this.#stack, MAX_DEPTH);
  }

  /** Wanted key `w`'s value in the last line checked as an object: its token's start in `d`. */
  start(w: number): number {
    return this.#i32[(this.#out >> 2) + ANSWER_WORDS * this.#entry[w]!]! - this.#data + this.#from;
  }

  end(w: number): number {
    return this.#i32[(this.#out >> 2) + ANSWER_WORDS * this.#entry[w]! + 1]! - this.#data + this.#from;
  }

  /** FieldKind of wanted key `w`'s value: JsonString, Missing (null or absent) or Plain. */
  kind(w: number): number {
    return this.#i32[(this.#out >> 2) + ANSWER_WORDS * this.#entry[w]! + 2]!;
  }
}
