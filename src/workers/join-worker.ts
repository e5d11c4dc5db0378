/**
 * Worker entry for a plan's `finish`: joins and hashes whole plain parts (io/join-files.ts) and
 * nothing else. It loads a handful of modules, so its threads are up in a fraction of the time a
 * shuffle worker takes (that one loads both stages and their WebAssembly: ~0.35 s before the
 * first part could start, on two threads here).
 */
import { JOIN_BUFFER, joinFiles } from '../io/join-files.js';
import { serveLane } from './lanes.js';
import { byKind, type JoinMessage } from './protocol.js';

/** One copy buffer, kept between parts. */
const buffer = Buffer.allocUnsafe(JOIN_BUFFER);

serveLane<JoinMessage, unknown, null>(byKind<JoinMessage>({ join: (m) => ({ result: joinFiles(m, buffer) }) }), () => ({ final: null }));
