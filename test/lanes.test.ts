/**
 * Worker lanes (src/workers/lanes.ts) as `finish` uses them: `ready` settles once every thread has
 * loaded its modules (not when it merely starts), fails when a thread cannot load, and the lanes
 * then do real work (the join worker of dist/workers, which `npm test` builds first).
 */
import { createHash } from 'node:crypto';
import { mkdtempSync, readFileSync, rmSync, writeFileSync } from 'node:fs';
import { tmpdir } from 'node:os';
import { join } from 'node:path';
import { pathToFileURL } from 'node:url';
import { afterAll, describe, expect, it } from 'vitest';
import { WorkerLanes } from '../src/workers/lanes.js';
import type { JoinMessage } from '../src/workers/protocol.js';
import { resolveWorkerFile } from '../src/workers/worker-file.js';

const dir = mkdtempSync(join(tmpdir(), 'rowdeck-lanes-'));
afterAll(() => rmSync(dir, { recursive: true, force: true }));

describe('worker lanes', () => {
  it('are ready only once each thread has loaded its modules', async () => {
    // A worker whose module takes 400 ms to load before it serves: `ready` must wait for it (a
    // `ready` taken from the thread's start, its 'online' event, settles in ~0.1 s).
    const lanesUrl = pathToFileURL(resolveWorkerFile('lanes.js')).href;
    const slow = join(dir, 'slow-worker.mjs');
    writeFileSync(slow, `await new Promise((r) => setTimeout(r, 400));\nconst { serveLane } = await import(${JSON.stringify(lanesUrl)});\nserveLane((t) => ({ result: t.n * 2 }), () => ({ final: null }));\n`);
    const t0 = performance.now();
    const lanes = new WorkerLanes<{ kind: 'x'; n: number }, null>(slow, 2, null);
    try {
      let readyAt = -1;
      await lanes.ready.then(() => (readyAt = performance.now() - t0));
      expect(readyAt).toBeGreaterThanOrEqual(400);
      expect(await lanes.run({ kind: 'x', n: 21 } as never)).toBe(42);
    } finally {
      await lanes.destroy();
    }
  });

  it('fail to be ready when a thread cannot load, and refuse tasks', async () => {
    const broken = join(dir, 'broken-worker.mjs');
    writeFileSync(broken, "throw new Error('cannot load');\n");
    const lanes = new WorkerLanes<JoinMessage, null>(broken, 1, null);
    try {
      await expect(lanes.ready).rejects.toThrow(/cannot load/);
      await expect(lanes.run({ kind: 'join', out: join(dir, 'never'), header: null, files: [] })).rejects.toThrow(/cannot load/);
    } finally {
      await lanes.destroy();
    }
  });

  it('join parts on the join worker once ready: the bytes in order and their sha256 (node:crypto)', async () => {
    const a = join(dir, 'a.bin');
    const b = join(dir, 'b.bin');
    writeFileSync(a, Buffer.alloc(3 << 20, 'ab,1\n'));
    writeFileSync(b, Buffer.alloc((1 << 20) + 17, 'cd,2\n'));
    const header = Buffer.from('k,v\n');
    const lanes = new WorkerLanes<JoinMessage, null>(resolveWorkerFile('join-worker.js'), 2, null);
    try {
      await lanes.ready;
      const outs = [join(dir, 'p0.csv'), join(dir, 'p1.csv')];
      const results = await Promise.all([lanes.run({ kind: 'join', out: outs[0]!, header, files: [a, b] }), lanes.run({ kind: 'join', out: outs[1]!, header: null, files: [b] })]);
      const want0 = Buffer.concat([header, readFileSync(a), readFileSync(b)]);
      expect(readFileSync(outs[0]!).equals(want0)).toBe(true);
      expect(results[0]).toMatchObject({ bytes: want0.length, sha256: createHash('sha256').update(want0).digest('hex') });
      expect(results[1]).toMatchObject({ bytes: readFileSync(b).length, sha256: createHash('sha256').update(readFileSync(b)).digest('hex') });
    } finally {
      await lanes.destroy();
    }
  });
});
