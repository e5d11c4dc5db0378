/**
 * Facts of the machine the code runs on that typed arrays expose. WebAssembly memory, the spill
 * layout's words and the hashes are defined little-endian; typed-array views read words in the
 * machine's own order, so code that reads words through them checks this first.
 */
export const LITTLE_ENDIAN = new Uint8Array(Uint16Array.of(1).buffer)[0] === 1;
