/**
 * The little of the WebAssembly JS API this project uses (lib "dom" is not loaded here), and
 * instantiation of its embedded modules (src/io/structural.ts, src/engine/gather-kernel.ts).
 * Each module is written as text by a script in scripts/, and embedded as base64.
 */
import { LITTLE_ENDIAN } from './platform.js';

export interface WasmMemory {
  readonly buffer: ArrayBuffer;
  grow(pages: number): number;
}

declare const WebAssembly: {
  Module: new (bytes: Uint8Array) => object;
  Instance: new (module: object) => { exports: Record<string, unknown> };
};


/**
 * The exports of a fresh instance of the module, or null where this runtime cannot run it
 * (no WebAssembly, as under --jitless, or no 128-bit SIMD) or where typed arrays would see its
 * memory byte-swapped (a big-endian machine): callers keep a JavaScript path.
 */
export function instantiate<E>(base64: string): E | null {
  if (!LITTLE_ENDIAN) return null;
  try {
    // One compilation per module and thread: instances share its code, and its optimised tier.
    let module = compiled.get(base64);
    if (module === undefined) {
      module = new WebAssembly.Module(Buffer.from(base64, 'base64'));
      compiled.set(base64, module);
    }
    return new WebAssembly.Instance(module).exports as E;
  } catch {
    return null;
  }
}

const compiled = new Map<string, object>();

/** Grows `memory` to at least `bytes`. False when it cannot grow that far. */
export function growTo(memory: WasmMemory, bytes: number): boolean {
  const have = memory.buffer.byteLength;
  if (bytes <= have) return true;
  try {
    memory.grow(Math.ceil((bytes - have) / 65536));
    return true;
  } catch {
    return false;
  }
}
