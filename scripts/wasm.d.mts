/** One generated file: its path from the repository's root, and its text. */
export interface GeneratedFile {
  path: string;
  content: string;
}

/** A module's generator (scripts/wasm-module.mjs: wasmModule). */
export interface WasmModuleScript {
  script: string;
  wat: string;
  ts: string;
  constName: string;
  layoutName?: string;
  text(): string;
  assemble(text: string): Promise<Buffer>;
  files(): Promise<GeneratedFile[]>;
  write(): Promise<void>;
  stale(): Promise<string[]>;
}

export const MODULES: Record<'structural' | 'jsonl' | 'spill' | 'gather' | 'sort' | 'stats', WasmModuleScript>;
export function staleFiles(): Promise<string[]>;
