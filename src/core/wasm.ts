/**
 * The little of the WebAssembly JS API this project uses (lib "dom" is not loaded here), and
 * instantiation of its six embedded modules (each written as text by a script in scripts/ and
 * embedded as base64; `npm run wasm` rebuilds them all).
 *
 * Every module has a JavaScript twin that writes the same bytes. The twin runs where this runtime
 * cannot run the modules: no WebAssembly (as under --jitless), no 128-bit SIMD, a big-endian
 * machine (typed arrays would see the module's memory byte-swapped), or no memory left for a new
 * instance. A module of our own that does not compile or link where WebAssembly SIMD is there is a
 * bug, not a missing feature: `instantiate` throws RDK_INTERNAL for it, so it fails the tests
 * instead of quietly running the twins.
 */
import { LITTLE_ENDIAN } from './platform.js';
import { RowdeckError } from '../errors.js';
import { twinSwitch, type WasmModuleName } from '../flags.js';

export interface WasmMemory {
  readonly buffer: ArrayBuffer;
  grow(pages: number): number;
}

interface WasmApi {
  Module: new (bytes: Uint8Array) => object;
  Instance: new (module: object) => { exports: Record<string, unknown> };
  validate(bytes: Uint8Array): boolean;
}

/** The WebAssembly namespace, or undefined where this runtime has none (node --jitless). */
const api = Reflect.get(globalThis, 'WebAssembly') as WasmApi | undefined;

/**
 * `(module (func (result v128) (i8x16.splat (i32.const 0))))`, assembled (test/wasm.test.ts
 * checks it against wabt): valid only where WebAssembly has 128-bit SIMD.
 */
export const SIMD_PROBE = Uint8Array.of(0, 97, 115, 109, 1, 0, 0, 0, 1, 5, 1, 96, 0, 1, 123, 3, 2, 1, 0, 10, 8, 1, 6, 0, 65, 0, 253, 15, 11);

/** Where each module's text is (for messages; test/wasm.test.ts checks these against scripts/wasm.mjs). */
export const WASM_SOURCES: Readonly<Record<WasmModuleName, string>> = {
  structural: 'src/io/structural.wat',
  jsonl: 'src/io/jsonl.wat',
  spill: 'src/engine/spill.wat',
  gather: 'src/engine/gather.wat',
  sort: 'src/core/sort.wat',
  stats: 'src/core/stats.wat',
};

let runsModules: boolean | undefined;

/** Whether this runtime can run the modules: WebAssembly with 128-bit SIMD, on a little-endian machine. */
export function wasmSimdAvailable(): boolean {
  if (runsModules === undefined) {
    try {
      runsModules = LITTLE_ENDIAN && api !== undefined && api.validate(SIMD_PROBE);
    } catch {
      runsModules = false;
    }
  }
  return runsModules;
}

/**
 * The exports of a fresh instance of `module` (its bytes in `base64`), or null where this runtime
 * cannot run the modules (see wasmSimdAvailable) or has no memory for another instance: callers
 * then keep their JavaScript twin. Throws RDK_INTERNAL when the bytes do not compile or link, or
 * an export in `needs` is missing.
 */
export function instantiate<E>(module: WasmModuleName, base64: string, needs: readonly (keyof E & string)[]): E | null {
  if (!wasmSimdAvailable()) return null;
  const wasm = api!;
  // One compilation per module and thread: instances share its code, and its optimised tier.
  let compiledModule = compiled.get(base64);
  if (compiledModule === undefined) {
    try {
      compiledModule = new wasm.Module(Buffer.from(base64, 'base64'));
    } catch (err) {
      if (err instanceof RangeError) return null;
      throw brokenModule(module, 'does not compile', err);
    }
    compiled.set(base64, compiledModule);
  }
  let exports: Record<string, unknown>;
  try {
    exports = new wasm.Instance(compiledModule).exports;
  } catch (err) {
    if (err instanceof RangeError) return null;
    throw brokenModule(module, 'does not instantiate', err);
  }
  const missing = needs.filter((name) => exports[name] === undefined);
  if (missing.length > 0) throw brokenModule(module, `has no export ${missing.join(', ')}`);
  return exports as E;
}

const compiled = new Map<string, object>();

function brokenModule(module: WasmModuleName, what: string, err?: unknown): RowdeckError {
  const why = err instanceof Error ? ` (${err.name}: ${err.message})` : '';
  return new RowdeckError(
    'RDK_INTERNAL',
    `${WASM_SOURCES[module]}: the embedded WebAssembly module ${what} on Node ${process.version}${why}. ` +
      `This is a bug in rowdeck, not in the data: please report it; ${twinSwitch(module)}=js runs without this module meanwhile.`,
    { module },
  );
}

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
