/** A function returning numbers in [0, 1), the same sequence for the same 32-bit seed. */
export function createRandom(seed: number): () => number;
