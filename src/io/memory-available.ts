/**
 * The memory this process may use, as the machine says at start: the kernel's estimate of what
 * can be taken without swapping (`MemAvailable` in /proc/meminfo), lowered to what is left under
 * the process's memory control group limit where one is set (a container). The default budget of
 * `shuffle` is a share of it, so the same command holds more in memory on a large machine and
 * spills early on a small one; the output does not depend on it.
 */
import { readFileSync } from 'node:fs';
import { freemem } from 'node:os';

const MiB = 1024 * 1024;
const GiB = 1024 * MiB;

/** The default budget's share of the available memory, and its bounds. */
export const DEFAULT_MEMORY_SHARE = 1 / 4;
export const DEFAULT_MEMORY_MIN = 128 * MiB;
export const DEFAULT_MEMORY_MAX = 16 * GiB;

/** What a file holds as text, or null when it cannot be read. */
function readText(path: string): string | null {
  try {
    return readFileSync(path, 'utf8');
  } catch {
    return null;
  }
}

/** `MemAvailable` of a /proc/meminfo text, in bytes, or null. */
export function memAvailableOf(meminfo: string): number | null {
  const m = /^MemAvailable:\s+(\d+)\s*kB$/m.exec(meminfo);
  return m ? Number(m[1]) * 1024 : null;
}

/**
 * Room left under the memory control group of this process (cgroup v2 `memory.max` less
 * `memory.current`, or v1 `memory.limit_in_bytes` less `memory.usage_in_bytes`), or null where
 * there is no limit or it cannot be read.
 */
export function cgroupRoom(read: (path: string) => string | null = readText): number | null {
  const cgroups = read('/proc/self/cgroup');
  if (cgroups === null) return null;
  const num = (text: string | null): number | null => {
    const t = text?.trim();
    return t && /^\d+$/.test(t) ? Number(t) : null;
  };
  for (const line of cgroups.split('\n')) {
    const [id, controllers, path] = line.split(':');
    if (path === undefined) continue;
    const base = path === '/' ? '' : path;
    if (id === '0' && controllers === '') {
      const limit = num(read(`/sys/fs/cgroup${base}/memory.max`));
      const used = num(read(`/sys/fs/cgroup${base}/memory.current`));
      if (limit !== null) return Math.max(0, limit - (used ?? 0));
    } else if (controllers!.split(',').includes('memory')) {
      const limit = num(read(`/sys/fs/cgroup/memory${base}/memory.limit_in_bytes`));
      const used = num(read(`/sys/fs/cgroup/memory${base}/memory.usage_in_bytes`));
      // "No limit" reads as a number near 2^63.
      if (limit !== null && limit < 2 ** 60) return Math.max(0, limit - (used ?? 0));
    }
  }
  return null;
}

/** Bytes of memory available to this process now. */
export function availableMemory(): number {
  const meminfo = readText('/proc/meminfo');
  let avail = (meminfo !== null ? memAvailableOf(meminfo) : null) ?? freemem();
  const room = cgroupRoom();
  if (room !== null) avail = Math.min(avail, room);
  return avail;
}

/** The budget for `available` bytes: a quarter, within [DEFAULT_MEMORY_MIN, DEFAULT_MEMORY_MAX], rounded down to whole MiB. */
export function defaultMemoryFor(available: number): number {
  const share = Math.floor((available * DEFAULT_MEMORY_SHARE) / MiB) * MiB;
  return Math.min(DEFAULT_MEMORY_MAX, Math.max(DEFAULT_MEMORY_MIN, share));
}

/** The default budget now (each run decides it as it starts). */
export function defaultMemory(): number {
  return defaultMemoryFor(availableMemory());
}
