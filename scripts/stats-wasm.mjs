#!/usr/bin/env node
// Writes src/core/stats.wat (the WebAssembly text of the column statistics' per-value work) and
// src/core/stats-wasm.ts (the same module assembled, as base64), using wabt from the npm registry.
// LAYOUT goes beside the bytes. Run after changing this file: npm run wasm (all six modules) or
// node scripts/stats-wasm.mjs. test/wasm.test.ts checks that the files are what this script makes.
//
// What the module does, for a run of one column's fields of a record batch (src/core/stats-kernel.ts
// lays out its memory), each field read as addField reads it (quotes off, a CSV "" undone):
// - column(): for a column past the distinct cap, adds each value to the column's accumulator slot
//   by the steps of ColumnState.addEstimated in src/core/column-state.ts:
//   - the value's hash (hashKey) to the distinct-count sketch (updateSketch);
//   - its kind (classifyValue: ISO date, boolean, decimal number, or text) to the kind counts, and
//     a number's value to the minimum, maximum and exact decimal sums (DecimalSums.add, the same
//     floating-point operations on the same integers, so the same exact accumulators);
//   - its bytes to the text bounds (updateBounds).
// - exact(): for a column below the cap, counts each value against the keys JavaScript registered
//   (ValueCounter.find's comparison: hash, length and three words, for keys of up to 12 bytes).
// Each stops, before changing anything, at a value it leaves to JavaScript: a JSON string with an
// escape, a value longer than the bounds' room, a number that needs the general conversion (more
// than 15 significant digits, or a scale outside 0..22), a key not registered. JavaScript adds that
// value to the column's own state and calls again from the next one; the two states merge exactly
// (merge is order-independent), so the figures are those of the JavaScript path alone.
import { fileURLToPath } from 'node:url';
import { get, i32, wasmModule } from './wasm-module.mjs';

// Memory layout; src/core/stats-kernel.ts reads it as STATS_LAYOUT (LAYOUT below).
export const POW10_AT = 0; // 23 f64: 10^0..10^22, all exact
export const DAYS_AT = 192; // 13 bytes: days in month 1..12 (February 29)
export const SCRATCH_AT = 1024; // a CSV value with "" undone (up to SLOT.boundCap bytes, and slack)
export const SLOTS_AT = 4096;
export const SLOT = {
  bytes: 8192,
  sketch: 0, // 4096 u8 registers
  acc: 4096, // 23 scales x 6 f64 (DecimalSums' accumulators)
  kinds: 5200, // 5 f64: integer, number, boolean, datetime, text
  min: 5240, // f64
  max: 5248, // f64
  count: 5256, // f64: values added (not missing)
  missing: 5264, // f64
  decN: 5272, // f64: values added to acc
  bits: 5280, // i32: KIND_BIT of the kinds seen
  text: 5284, // i32: 1 once the type is text (classifying stops)
  loLen: 5288, // i32, -1 when no value yet
  hiLen: 5292,
  loK0: 5296, // i32 order keys of the bounds' first 8 bytes
  loK1: 5300,
  hiK0: 5304,
  hiK1: 5308,
  lo: 5376, // boundCap bytes
  hi: 6400, // boundCap bytes
  boundCap: 1024,
};
const SKETCH_REGISTERS = 4096; // u8 each, indexed by a hash's top bits
const ACC_SCALES = 23; // DecimalSums' scales 0..22
const ACC_PER_SCALE = 6; // f64 accumulators a scale
const EXACT_ENTRY_BYTES = 24; // exact(): a key's entry (hash, length + 1, three words, index: i32 each)

/** What stats-kernel.ts reads: the slot's layout and the sizes inside it. */
export const LAYOUT = {
  slotsAt: SLOTS_AT,
  slot: SLOT,
  sketchRegisters: SKETCH_REGISTERS,
  accScales: ACC_SCALES,
  accPerScale: ACC_PER_SCALE,
  kinds: 5,
  exactEntryBytes: EXACT_ENTRY_BYTES,
};
const LAYOUT_DOC = {
  slotsAt: "the first column's slot (constants and a scratch area lie below)",
  slot: "a column's accumulator slot: byte offsets inside it",
  'slot.bytes': 'the size of a slot',
  'slot.acc': "DecimalSums' accumulators: accScales x accPerScale f64",
  'slot.count': 'f64: values added (not missing)',
  'slot.missing': 'f64: missing values',
  'slot.decN': 'f64: values added to the accumulators',
  'slot.bits': 'i32: KIND_BIT of the kinds seen',
  'slot.text': 'i32: 1 once the type is text (classifying stops)',
  'slot.loLen': 'i32: length of the low text bound, -1 while there is none (hiLen: the high one)',
  'slot.lo': 'the low text bound, boundCap bytes (hi: the high one)',
  'slot.boundCap': 'the longest value the module adds itself',
  sketchRegisters: 'registers of the distinct-count sketch (a byte each, from slot.sketch)',
  accScales: "DecimalSums' scales (0..22), accPerScale f64 accumulators each, from slot.acc",
  accPerScale: 'f64 accumulators a scale',
  kinds: 'f64 counts of kinds from slot.kinds: integer, number, boolean, datetime, text',
  exactEntryBytes: "a key's entry in a column's exact table: hash, length + 1, three words, index (i32 each); the counts (u32) follow the entries",
};

const K_TEXT = 4;
const ESCAPE = 5;
const HASH_SEED = 0x811c9dc5;
const HASH_MUL = 0x9e3779b1;
const TWO26 = 2 ** 26;
const INV_TWO26 = 2 ** -26;

/** `s` as a WebAssembly text string of bytes. */
function dataString(bytes) {
  return [...bytes].map((b) => `\\${b.toString(16).padStart(2, '0')}`).join('');
}

const pow10 = new Uint8Array(Float64Array.from({ length: ACC_SCALES }, (_, k) => 10 ** k).buffer);
const days = Uint8Array.of(0, 31, 29, 31, 30, 31, 30, 31, 31, 30, 31, 30, 31);

const f64 = (x) => `(f64.const ${x})`;
const isDigit = (x) => `(i32.lt_u (i32.sub ${x} (i32.const 48)) (i32.const 10))`;
/** Adds `v` (f64) to the f64 at address `at` + `off`. */
const addF = (at, off, v) => `(f64.store offset=${off} ${at} (f64.add (f64.load offset=${off} ${at}) ${v}))`;

/** value-kind.ts: readTwoDigits of the bytes at addr + off, into local $to (in line: uses $ta, $tb). */
function two(to, addr, off = 0) {
  return `(local.set $ta (i32.sub (i32.load8_u offset=${off} ${addr}) (i32.const 48)))
    (local.set $tb (i32.sub (i32.load8_u offset=${off + 1} ${addr}) (i32.const 48)))
    (local.set $${to} (select (i32.add (i32.mul ${get('ta')} (i32.const 10)) ${get('tb')}) (i32.const -1)
      (i32.and (i32.lt_u ${get('ta')} (i32.const 10)) (i32.lt_u ${get('tb')} (i32.const 10)))))`;
}

/** value-sketch.ts: mix32 (murmur3's finaliser) of local $x, in place. */
function mix(x) {
  return `(local.set $${x} (i32.mul (i32.xor ${get(x)} (i32.shr_u ${get(x)} (i32.const 16))) ${i32(0x85ebca6b)}))
          (local.set $${x} (i32.mul (i32.xor ${get(x)} (i32.shr_u ${get(x)} (i32.const 13))) ${i32(0xc2b2ae35)}))
          (local.set $${x} (i32.xor ${get(x)} (i32.shr_u ${get(x)} (i32.const 16))))`;
}

/** value-bytes.ts: orderKey of local $w (byte-swapped, sign bit flipped). */
function orderKey(w) {
  return `(i32.xor
            (i32.or (i32.or (i32.shl ${get(w)} (i32.const 24)) (i32.shl (i32.and ${get(w)} (i32.const 0xff00)) (i32.const 8)))
                    (i32.or (i32.and (i32.shr_u ${get(w)} (i32.const 8)) (i32.const 0xff00)) (i32.shr_u ${get(w)} (i32.const 24))))
            ${i32(0x80000000)})`;
}

/**
 * classifyNumber's loop over a run of digits (label $name): each one into the integer
 * $digitsValue, the significant ones counted in $sig, all of them in $count. `pad` indents the
 * lines after the first.
 */
function digitRun(name, count, pad) {
  return `(block $end (loop $${name}
${pad}  (br_if $end (i32.ge_u ${get('i')} ${get('e')}))
${pad}  (local.set $c (i32.sub (i32.load8_u ${get('i')}) (i32.const 48)))
${pad}  (br_if $end (i32.ge_u ${get('c')} (i32.const 10)))
${pad}  (local.set $digitsValue (i64.add (i64.mul ${get('digitsValue')} (i64.const 10)) (i64.extend_i32_u ${get('c')})))
${pad}  (local.set $sig (i32.add ${get('sig')} (i64.ne ${get('digitsValue')} (i64.const 0))))
${pad}  (local.set $${count} (i32.add ${get(count)} (i32.const 1)))
${pad}  (local.set $i (i32.add ${get('i')} (i32.const 1)))
${pad}  (br $${name})))`;
}

/**
 * column-state.ts: one half of updateBounds, then setLo or setHi: the value at $p replaces the bound when
 * there is none, or when it orders before it (lt_s; after it: gt_s), decided by the first 8 bytes'
 * keys and only when they tie by the bytes. (A chain of branches: i32.and and i32.or evaluate both
 * sides, and the byte comparison is the costly side.)
 */
function bound(name, op, lenAt, k0At, k1At, bytesAt) {
  const S = SLOT;
  const load = (at) => `(i32.load offset=${S[at]} ${get('slot')})`;
  return `(block $keep_${name}
            (block $set_${name}
              (br_if $set_${name} (i32.lt_s ${load(lenAt)} (i32.const 0)))
              (br_if $set_${name} (i32.${op} ${get('k0')} ${load(k0At)}))
              (br_if $keep_${name} (i32.ne ${get('k0')} ${load(k0At)}))
              (br_if $set_${name} (i32.${op} ${get('k1')} ${load(k1At)}))
              (br_if $keep_${name} (i32.ne ${get('k1')} ${load(k1At)}))
              (br_if $keep_${name} (i32.eqz (i32.${op} (call $cmp ${get('p')} ${get('len')} (i32.add ${get('slot')} (i32.const ${S[bytesAt]})) ${load(lenAt)}) (i32.const 0)))))
            (memory.copy (i32.add ${get('slot')} (i32.const ${S[bytesAt]})) ${get('p')} ${get('len')})
            (i32.store offset=${S[lenAt]} ${get('slot')} ${get('len')})
            (i32.store offset=${S[k0At]} ${get('slot')} ${get('k0')})
            (i32.store offset=${S[k1At]} ${get('slot')} ${get('k1')}))`;
}

/**
 * The field at index $k: its value's bytes at $p, $len of them, as stats.ts: addField reads it:
 * missing fields counted and skipped (br $next), quotes taken off, a CSV field's "" undone into
 * the scratch area, and a return of $i where JavaScript must read it (a JSON escape, a value
 * longer than the bounds' room). Uses $s, $kd, $w, $j, $out.
 */
function field() {
  const S = SLOT;
  return `(local.set $s (i32.load (i32.add ${get('fs')} (i32.shl ${get('k')} (i32.const 2)))))
          (local.set $len (i32.sub (i32.load (i32.add ${get('fe')} (i32.shl ${get('k')} (i32.const 2)))) ${get('s')}))
          (local.set $kd (i32.load8_u (i32.add ${get('fk')} ${get('k')})))
          (if ${get('kd')}
            (then
            ;; stats.ts: addField. A missing field; or a quoted one (CSV, JSON), taken without its
            ;; quotes when nothing in it needs undoing ("" in CSV, \\ in JSON), else left to JavaScript.
            (if (i32.eq ${get('kd')} (i32.const 3)) (then
              ${addF(get('slot'), S.missing, f64(1))}
              (br $next)))
            (if (i32.gt_u ${get('kd')} (i32.const 2)) (then (return ${get('i')})))
            (local.set $s (i32.add ${get('s')} (i32.const 1)))
            (local.set $len (i32.sub ${get('len')} (i32.const 2)))
            (if (i32.gt_s ${get('len')} (i32.const ${S.boundCap})) (then (return ${get('i')})))
            (local.set $w (select (i32.const 0x22) (i32.const 0x5c) (i32.eq ${get('kd')} (i32.const 1))))
            (local.set $p (i32.add ${get('base')} ${get('s')}))
            (local.set $j (i32.const 0))
            (block $plain (loop $scan
              (br_if $plain (i32.ge_s ${get('j')} ${get('len')}))
              (if (i32.eq (i32.load8_u (i32.add ${get('p')} ${get('j')})) ${get('w')}) (then
                ;; A JSON escape is JavaScript's to decode; a CSV "" is undone into the scratch area.
                (if (i32.eq ${get('kd')} (i32.const 2)) (then (return ${get('i')})))
                (local.set $out (i32.const ${SCRATCH_AT}))
                (memory.copy ${get('out')} ${get('p')} ${get('j')})
                (local.set $out (i32.add ${get('out')} ${get('j')}))
                (block $undone (loop $undo
                  (br_if $undone (i32.ge_s ${get('j')} ${get('len')}))
                  (local.set $w (i32.load8_u (i32.add ${get('p')} ${get('j')})))
                  (i32.store8 ${get('out')} ${get('w')})
                  (local.set $out (i32.add ${get('out')} (i32.const 1)))
                  (local.set $j (i32.add ${get('j')} (select (i32.const 2) (i32.const 1) (i32.eq ${get('w')} (i32.const 0x22)))))
                  (br $undo)))
                (local.set $p (i32.const ${SCRATCH_AT}))
                (local.set $len (i32.sub ${get('out')} ${get('p')}))
                (br $plain)))
              (local.set $j (i32.add ${get('j')} (i32.const 1)))
              (br $scan))))
            (else (local.set $p (i32.add ${get('base')} ${get('s')}))))
          (if (i32.le_s ${get('len')} (i32.const 0)) (then
            ${addF(get('slot'), S.missing, f64(1))}
            (br $next)))`;
}

/** The hash of the $len bytes at $p into $h (column-state.ts: hashKey, mixed), its first words into $w0 $w1 $w2. */
function hashWords() {
  // Words 0..2 in line (most values are 12 bytes or shorter), then a loop for the rest.
  const word = (n, into) => `(local.set $w (i32.load offset=${4 * n} ${get('p')}))
            (if (i32.lt_u ${get('len')} (i32.const ${4 * n + 4})) (then
              (local.set $w (i32.and ${get('w')} (i32.sub (i32.shl (i32.const 1) (i32.shl (i32.sub ${get('len')} (i32.const ${4 * n})) (i32.const 3))) (i32.const 1))))))
            (local.set $${into} ${get('w')})
            ${step}`;
  const step = `(local.set $h (i32.mul (i32.xor ${get('h')} ${get('w')}) ${i32(HASH_MUL)}))
            (local.set $h (i32.xor ${get('h')} (i32.shr_u ${get('h')} (i32.const 15))))`;
  return `;; The hash (column-state.ts: hashKey): little-endian words, the last one zero-padded.
          (local.set $h (i32.xor ${i32(HASH_SEED)} ${get('len')}))
          (local.set $w1 (i32.const 0))
          (local.set $w2 (i32.const 0))
          ${word(0, 'w0')}
          (if (i32.gt_u ${get('len')} (i32.const 4)) (then
            ${word(1, 'w1')}
            (if (i32.gt_u ${get('len')} (i32.const 8)) (then
              ${word(2, 'w2')}
              (local.set $j (i32.const 12))
              (block $words (loop $word
                (br_if $words (i32.ge_u ${get('j')} ${get('len')}))
                (local.set $w (i32.load (i32.add ${get('p')} ${get('j')})))
                (if (i32.lt_u (i32.sub ${get('len')} ${get('j')}) (i32.const 4)) (then
                  (local.set $w (i32.and ${get('w')}
                    (i32.sub (i32.shl (i32.const 1) (i32.shl (i32.sub ${get('len')} ${get('j')}) (i32.const 3))) (i32.const 1))))))
                ${step}
                (local.set $j (i32.add ${get('j')} (i32.const 4)))
                (br $word)))))))
          ${mix('h')}`;
}

/**
 * The loop of column() and exact(): field f of records $i0..$i1 (index $k = i * W + f), each read
 * by field() and hashed by hashWords(), a value longer than `limit` left to JavaScript; `body`
 * takes it from there (br $next for the next record). Returns $i1 after the last.
 */
function eachValue(limit, body) {
  return `(local.set $i ${get('i0')})
    (local.set $k (i32.add (i32.mul ${get('i0')} ${get('W')}) ${get('f')}))
    (block $done
      (loop $value
        (br_if $done (i32.ge_u ${get('i')} ${get('i1')}))
        (block $next
          ${field()}
          (if (i32.gt_u ${get('len')} (i32.const ${limit})) (then (return ${get('i')})))
          ${hashWords()}
${body}        (local.set $i (i32.add ${get('i')} (i32.const 1)))
        (local.set $k (i32.add ${get('k')} ${get('W')}))
        (br $value)))
    ${get('i1')}`;
}

export function wat() {
  const S = SLOT;
  return `;; Generated by scripts/stats-wasm.mjs: edit that, not this file.
;; column(slot, base, fs, fe, fk, W, f, i0, i1) -> the first record (i0..i1) whose field it leaves to
;;   JavaScript, or i1. Field f of record i is at index i * W + f of fs, fe (i32 arrays: start and
;;   end, offsets from base) and fk (u8 kinds: 0 plain, 1 CSV quoted, 2 JSON string, 3 missing). Each value is added to the accumulator
;;   slot at slot (layout in scripts/stats-wasm.mjs). Reads up to 7 bytes past a value's end.
;; top(at, n) -> the largest of n u32 values (the end of a batch's bytes).
;; exact(slot, table, mask, base, fs, fe, fk, W, f, i0, i1) -> likewise, for a column below the
;;   distinct cap: each value found among the keys at table (mask + 1 entries) adds one to its
;;   key's count and to the slot's count; a value not found, or longer than 12 bytes, is left to
;;   JavaScript, which registers the keys it adds.
(module
  (memory (export "memory") 1)
  (data (i32.const ${POW10_AT}) "${dataString(pow10)}")
  (data (i32.const ${DAYS_AT}) "${dataString(days)}")
  ;; What classifyNumber read: the value, its decimal mantissa (signed) and its scale.
  (global $x (mut f64) (f64.const 0))
  (global $m (mut f64) (f64.const 0))
  (global $scale (mut i32) (i32.const 0))

  ;; value-kind.ts: isIsoDatetime, step for step.
  (func $isDate (param $p i32) (param $n i32) (result i32)
    (local $e i32) (local $i i32) (local $century i32) (local $yy i32) (local $month i32) (local $day i32)
    (local $year i32) (local $c i32) (local $a i32) (local $b i32) (local $fs i32) (local $ta i32) (local $tb i32)
    (local.set $e (i32.add ${get('p')} ${get('n')}))
    (if (i32.lt_u ${get('n')} (i32.const 10)) (then (return (i32.const 0))))
    (if (i32.or (i32.ne (i32.load8_u offset=4 ${get('p')}) (i32.const 0x2d)) (i32.ne (i32.load8_u offset=7 ${get('p')}) (i32.const 0x2d)))
      (then (return (i32.const 0))))
    ${two('century', get('p'))}
    ${two('yy', get('p'), 2)}
    ${two('month', get('p'), 5)}
    ${two('day', get('p'), 8)}
    (if (i32.or (i32.or (i32.lt_s ${get('century')} (i32.const 0)) (i32.lt_s ${get('yy')} (i32.const 0)))
          (i32.or (i32.or (i32.lt_s ${get('month')} (i32.const 1)) (i32.gt_s ${get('month')} (i32.const 12))) (i32.lt_s ${get('day')} (i32.const 1))))
      (then (return (i32.const 0))))
    (if (i32.gt_s ${get('day')} (i32.load8_u offset=${DAYS_AT} ${get('month')})) (then (return (i32.const 0))))
    (if (i32.and (i32.eq ${get('month')} (i32.const 2)) (i32.eq ${get('day')} (i32.const 29))) (then
      (local.set $year (i32.add (i32.mul ${get('century')} (i32.const 100)) ${get('yy')}))
      (if (i32.eqz (i32.and (i32.eqz (i32.rem_u ${get('year')} (i32.const 4)))
                            (i32.or (i32.ne (i32.rem_u ${get('year')} (i32.const 100)) (i32.const 0)) (i32.eqz (i32.rem_u ${get('year')} (i32.const 400))))))
        (then (return (i32.const 0))))))
    (if (i32.eq ${get('n')} (i32.const 10)) (then (return (i32.const 1))))
    (local.set $c (i32.load8_u offset=10 ${get('p')}))
    (if (i32.and (i32.and (i32.ne ${get('c')} (i32.const 0x54)) (i32.ne ${get('c')} (i32.const 0x74))) (i32.ne ${get('c')} (i32.const 0x20)))
      (then (return (i32.const 0))))
    (if (i32.or (i32.lt_u ${get('n')} (i32.const 16)) (i32.ne (i32.load8_u offset=13 ${get('p')}) (i32.const 0x3a)))
      (then (return (i32.const 0))))
    ${two('a', get('p'), 11)}
    ${two('b', get('p'), 14)}
    (if (i32.or (i32.or (i32.lt_s ${get('a')} (i32.const 0)) (i32.gt_s ${get('a')} (i32.const 23)))
                (i32.or (i32.lt_s ${get('b')} (i32.const 0)) (i32.gt_s ${get('b')} (i32.const 59))))
      (then (return (i32.const 0))))
    (local.set $i (i32.add ${get('p')} (i32.const 16)))
    (if (i32.lt_u ${get('i')} ${get('e')}) (then
      (if (i32.eq (i32.load8_u ${get('i')}) (i32.const 0x3a)) (then
        (if (i32.gt_u (i32.add ${get('i')} (i32.const 3)) ${get('e')}) (then (return (i32.const 0))))
        ${two('a', get('i'), 1)}
        (if (i32.or (i32.lt_s ${get('a')} (i32.const 0)) (i32.gt_s ${get('a')} (i32.const 60))) (then (return (i32.const 0))))
        (local.set $i (i32.add ${get('i')} (i32.const 3)))
        (if (i32.lt_u ${get('i')} ${get('e')}) (then
          (local.set $c (i32.load8_u ${get('i')}))
          (if (i32.or (i32.eq ${get('c')} (i32.const 0x2e)) (i32.eq ${get('c')} (i32.const 0x2c))) (then
            (local.set $i (i32.add ${get('i')} (i32.const 1)))
            (local.set $fs ${get('i')})
            (block $end (loop $frac
              (br_if $end (i32.ge_u ${get('i')} ${get('e')}))
              (br_if $end (i32.eqz ${isDigit('(i32.load8_u (local.get $i))')}))
              (local.set $i (i32.add ${get('i')} (i32.const 1)))
              (br $frac)))
            (if (i32.eq ${get('i')} ${get('fs')}) (then (return (i32.const 0))))))))))))
    (if (i32.eq ${get('i')} ${get('e')}) (then (return (i32.const 1))))
    (local.set $c (i32.load8_u ${get('i')}))
    (if (i32.and (i32.or (i32.eq ${get('c')} (i32.const 0x5a)) (i32.eq ${get('c')} (i32.const 0x7a))) (i32.eq (i32.add ${get('i')} (i32.const 1)) ${get('e')}))
      (then (return (i32.const 1))))
    (if (i32.and (i32.ne ${get('c')} (i32.const 0x2b)) (i32.ne ${get('c')} (i32.const 0x2d))) (then (return (i32.const 0))))
    (local.set $i (i32.add ${get('i')} (i32.const 1)))
    (if (i32.gt_u (i32.add ${get('i')} (i32.const 2)) ${get('e')}) (then (return (i32.const 0))))
    ${two('a', get('i'))}
    (if (i32.or (i32.lt_s ${get('a')} (i32.const 0)) (i32.gt_s ${get('a')} (i32.const 23))) (then (return (i32.const 0))))
    (local.set $i (i32.add ${get('i')} (i32.const 2)))
    (if (i32.eq ${get('i')} ${get('e')}) (then (return (i32.const 1))))
    (if (i32.eq (i32.load8_u ${get('i')}) (i32.const 0x3a)) (then (local.set $i (i32.add ${get('i')} (i32.const 1)))))
    (if (i32.ne (i32.add ${get('i')} (i32.const 2)) ${get('e')}) (then (return (i32.const 0))))
    ${two('a', get('i'))}
    (i32.and (i32.ge_s ${get('a')} (i32.const 0)) (i32.le_s ${get('a')} (i32.const 59))))

  ;; value-kind.ts: classifyNumber, up to its general conversion (Number of the text), where it returns
  ;; ${ESCAPE} instead. Sets $x, $m and $scale for a number.
  (func $number (param $p i32) (param $n i32) (result i32)
    (local $i i32) (local $e i32) (local $c i32) (local $neg i32) (local $digitsValue i64) (local $mant f64) (local $sig i32) (local $digits i32)
    (local $frac i32) (local $dot i32) (local $exp i32) (local $ev i32) (local $eneg i32) (local $es i32) (local $k i32) (local $v f64)
    (local.set $i ${get('p')})
    (local.set $e (i32.add ${get('p')} ${get('n')}))
    (local.set $c (i32.load8_u ${get('i')}))
    (if (i32.or (i32.eq ${get('c')} (i32.const 0x2d)) (i32.eq ${get('c')} (i32.const 0x2b))) (then
      (local.set $neg (i32.eq ${get('c')} (i32.const 0x2d)))
      (local.set $i (i32.add ${get('i')} (i32.const 1)))))
    ${digitRun('int', 'digits', '    ')}
    (if (i32.lt_u ${get('i')} ${get('e')}) (then
      (if (i32.eq (i32.load8_u ${get('i')}) (i32.const 0x2e)) (then
        (local.set $dot (i32.const 1))
        (local.set $i (i32.add ${get('i')} (i32.const 1)))
        ${digitRun('fraction', 'frac', '        ')}
        (local.set $digits (i32.add ${get('digits')} ${get('frac')}))))))
    (if (i32.eqz ${get('digits')}) (then (return (i32.const ${K_TEXT}))))
    (if (i32.lt_u ${get('i')} ${get('e')}) (then
      (if (i32.eq (i32.or (i32.load8_u ${get('i')}) (i32.const 0x20)) (i32.const 0x65)) (then
        (local.set $exp (i32.const 1))
        (local.set $i (i32.add ${get('i')} (i32.const 1)))
        (if (i32.lt_u ${get('i')} ${get('e')}) (then
          (local.set $c (i32.load8_u ${get('i')}))
          (if (i32.or (i32.eq ${get('c')} (i32.const 0x2b)) (i32.eq ${get('c')} (i32.const 0x2d))) (then
            (local.set $eneg (i32.eq ${get('c')} (i32.const 0x2d)))
            (local.set $i (i32.add ${get('i')} (i32.const 1)))))))
        (local.set $es ${get('i')})
        (block $end (loop $expd
          (br_if $end (i32.ge_u ${get('i')} ${get('e')}))
          (local.set $c (i32.sub (i32.load8_u ${get('i')}) (i32.const 48)))
          (br_if $end (i32.ge_u ${get('c')} (i32.const 10)))
          (if (i32.lt_s ${get('ev')} (i32.const 100000)) (then
            (local.set $ev (i32.add (i32.mul ${get('ev')} (i32.const 10)) ${get('c')}))))
          (local.set $i (i32.add ${get('i')} (i32.const 1)))
          (br $expd)))
        (if (i32.eq ${get('i')} ${get('es')}) (then (return (i32.const ${K_TEXT}))))
        (if ${get('eneg')} (then (local.set $ev (i32.sub (i32.const 0) ${get('ev')}))))))))
    (if (i32.ne ${get('i')} ${get('e')}) (then (return (i32.const ${K_TEXT}))))
    (local.set $k (i32.sub ${get('frac')} ${get('ev')}))
    ;; Exact whenever it is used below (at most 15 significant digits; the digits are summed as an
    ;; integer, which wraps only past 18 digits, where the count already rules the fast paths out).
    (local.set $mant (f64.convert_i64_u ${get('digitsValue')}))
    (if (i32.and (i32.le_s ${get('sig')} (i32.const 15)) (i32.and (i32.ge_s ${get('k')} (i32.const 0)) (i32.le_s ${get('k')} (i32.const 22))))
      (then
        (local.set $v (if (result f64) (i32.eqz ${get('k')}) (then ${get('mant')})
          (else (f64.div ${get('mant')} (f64.load offset=${POW10_AT} (i32.shl ${get('k')} (i32.const 3)))))))
        (global.set $scale ${get('k')}))
      (else
        (if (i32.and (i32.lt_s ${get('k')} (i32.const 0)) (i32.le_s (i32.sub ${get('sig')} ${get('k')}) (i32.const 15)))
          (then
            (local.set $mant (f64.mul ${get('mant')} (f64.load offset=${POW10_AT} (i32.shl (i32.sub (i32.const 0) ${get('k')}) (i32.const 3)))))
            (local.set $v ${get('mant')})
            (global.set $scale (i32.const 0)))
          (else (return (i32.const ${ESCAPE}))))))
    (global.set $m (if (result f64) ${get('neg')} (then (f64.neg ${get('mant')})) (else ${get('mant')})))
    (global.set $x (if (result f64) ${get('neg')} (then (f64.neg ${get('v')})) (else ${get('v')})))
    ;; Below 10^15 here, so within the safe integers: an integer unless written with . or e.
    (i32.or ${get('dot')} ${get('exp')}))

  ;; value-kind.ts: classifyValue (with isBoolean), or ${ESCAPE}.
  (func $classify (param $p i32) (param $n i32) (result i32)
    (local $c i32) (local $w i32)
    (local.set $c (i32.load8_u ${get('p')}))
    (if (i32.or ${isDigit(get('c'))} (i32.or (i32.or (i32.eq ${get('c')} (i32.const 0x2d)) (i32.eq ${get('c')} (i32.const 0x2b))) (i32.eq ${get('c')} (i32.const 0x2e))))
      (then
        (if (i32.ge_u ${get('n')} (i32.const 10)) (then
          (if (i32.eq (i32.load8_u offset=4 ${get('p')}) (i32.const 0x2d)) (then
            (if (call $isDate ${get('p')} ${get('n')}) (then (return (i32.const 3))))))))
        (return (call $number ${get('p')} ${get('n')}))))
    (local.set $c (i32.or ${get('c')} (i32.const 0x20)))
    (if (i32.and (i32.ne ${get('c')} (i32.const 0x74)) (i32.ne ${get('c')} (i32.const 0x66))) (then (return (i32.const ${K_TEXT}))))
    (local.set $w (i32.or (i32.load ${get('p')}) ${i32(0x20202020)}))
    (if (i32.eq ${get('n')} (i32.const 4)) (then
      (return (select (i32.const 2) (i32.const ${K_TEXT}) (i32.eq ${get('w')} ${i32(0x65757274)})))))
    (if (i32.eq ${get('n')} (i32.const 5)) (then
      (return (select (i32.const 2) (i32.const ${K_TEXT})
        (i32.and (i32.eq ${get('w')} ${i32(0x736c6166)}) (i32.eq (i32.or (i32.load8_u offset=4 ${get('p')}) (i32.const 0x20)) (i32.const 0x65)))))))
    (i32.const ${K_TEXT}))

  ;; value-bytes.ts: compareBytes (only the sign counts).
  (func $cmp (param $a i32) (param $an i32) (param $b i32) (param $bn i32) (result i32)
    (local $n i32) (local $j i32) (local $x i64) (local $d i32)
    (local.set $n (select ${get('an')} ${get('bn')} (i32.lt_u ${get('an')} ${get('bn')})))
    (block $words (loop $word
      (br_if $words (i32.gt_u (i32.add ${get('j')} (i32.const 8)) ${get('n')}))
      (local.set $x (i64.xor (i64.load (i32.add ${get('a')} ${get('j')})) (i64.load (i32.add ${get('b')} ${get('j')}))))
      (if (i64.ne ${get('x')} (i64.const 0)) (then
        (local.set $j (i32.add ${get('j')} (i32.wrap_i64 (i64.shr_u (i64.ctz ${get('x')}) (i64.const 3)))))
        (return (i32.sub (i32.load8_u (i32.add ${get('a')} ${get('j')})) (i32.load8_u (i32.add ${get('b')} ${get('j')}))))))
      (local.set $j (i32.add ${get('j')} (i32.const 8)))
      (br $word)))
    (block $bytes (loop $byte
      (br_if $bytes (i32.ge_u ${get('j')} ${get('n')}))
      (local.set $d (i32.sub (i32.load8_u (i32.add ${get('a')} ${get('j')})) (i32.load8_u (i32.add ${get('b')} ${get('j')}))))
      (if ${get('d')} (then (return ${get('d')})))
      (local.set $j (i32.add ${get('j')} (i32.const 1)))
      (br $byte)))
    (i32.sub ${get('an')} ${get('bn')}))

  (func (export "column") (param $slot i32) (param $base i32) (param $fs i32) (param $fe i32) (param $fk i32)
        (param $W i32) (param $f i32) (param $i0 i32) (param $i1 i32) (result i32)
    (local $i i32) (local $k i32) (local $s i32) (local $len i32) (local $p i32) (local $h i32) (local $w i32)
    (local $w0 i32) (local $w1 i32) (local $w2 i32) (local $j i32) (local $out i32) (local $kd i32) (local $text i32) (local $bits i32) (local $r i32)
    (local $k0 i32) (local $k1 i32) (local $o i32) (local $a f64) (local $b f64) (local $t f64) (local $q f64)
    (local.set $text (i32.load offset=${S.text} ${get('slot')}))
    ${eachValue(S.boundCap, `          (if (i32.eqz ${get('text')}) (then
            (local.set $kd (call $classify ${get('p')} ${get('len')}))
            (if (i32.eq ${get('kd')} (i32.const ${ESCAPE})) (then (return ${get('i')})))))
          ;; From here on the value is this slot's.
          ${addF(get('slot'), S.count, f64(1))}
          ;; value-sketch.ts: updateSketch.
          (local.set $r (i32.add ${get('slot')} (i32.shr_u ${get('h')} (i32.const ${32 - Math.log2(SKETCH_REGISTERS)}))))
          (local.set $j (i32.xor ${get('h')} ${i32(0x5bd1e995)}))
          ${mix('j')}
          (local.set $j (i32.add (i32.clz ${get('j')}) (i32.const 1)))
          (if (i32.gt_u ${get('j')} (i32.load8_u offset=${S.sketch} ${get('r')})) (then (i32.store8 offset=${S.sketch} ${get('r')} ${get('j')})))
          (if ${get('text')}
            (then ${addF(get('slot'), S.kinds + 8 * K_TEXT, f64(1))})
            (else
              (local.set $o (i32.add ${get('slot')} (i32.shl ${get('kd')} (i32.const 3))))
              ${addF(get('o'), S.kinds, f64(1))}
              (if (i32.le_u ${get('kd')} (i32.const 1)) (then
                ;; column-state.ts: addNumber; exact-sum.ts: DecimalSums.add.
                (f64.store offset=${S.min} ${get('slot')} (f64.min (f64.load offset=${S.min} ${get('slot')}) (global.get $x)))
                (f64.store offset=${S.max} ${get('slot')} (f64.max (f64.load offset=${S.max} ${get('slot')}) (global.get $x)))
                (local.set $o (i32.add ${get('slot')} (i32.mul (global.get $scale) (i32.const ${8 * ACC_PER_SCALE}))))
                (local.set $a (f64.floor (f64.mul (global.get $m) ${f64(INV_TWO26)})))
                (local.set $b (f64.sub (global.get $m) (f64.mul ${get('a')} ${f64(TWO26)})))
                ${addF(get('o'), S.acc, get('a'))}
                ${addF(get('o'), S.acc + 8, get('b'))}
                (local.set $t (f64.mul ${get('b')} ${get('b')}))
                (local.set $q (f64.floor (f64.mul ${get('t')} ${f64(INV_TWO26)})))
                ${addF(get('o'), S.acc + 40, `(f64.sub ${get('t')} (f64.mul ${get('q')} ${f64(TWO26)}))`)}
                ${addF(get('o'), S.acc + 32, get('q'))}
                (if (f64.ne ${get('a')} ${f64(0)}) (then
                  (local.set $t (f64.mul (f64.mul ${f64(2)} ${get('a')}) ${get('b')}))
                  (local.set $q (f64.floor (f64.mul ${get('t')} ${f64(INV_TWO26)})))
                  ${addF(get('o'), S.acc + 32, `(f64.sub ${get('t')} (f64.mul ${get('q')} ${f64(TWO26)}))`)}
                  ${addF(get('o'), S.acc + 24, get('q'))}
                  (local.set $t (f64.mul ${get('a')} ${get('a')}))
                  (local.set $q (f64.floor (f64.mul ${get('t')} ${f64(INV_TWO26)})))
                  ${addF(get('o'), S.acc + 24, `(f64.sub ${get('t')} (f64.mul ${get('q')} ${f64(TWO26)}))`)}
                  ${addF(get('o'), S.acc + 16, get('q'))}))
                ${addF(get('slot'), S.decN, f64(1))}))
              ;; KIND_BIT and isTextFor.
              (local.set $bits (i32.or (i32.load offset=${S.bits} ${get('slot')})
                (select (i32.const 1) (i32.shl (i32.const 1) (i32.sub ${get('kd')} (i32.const 1))) (i32.le_u ${get('kd')} (i32.const 1)))))
              (i32.store offset=${S.bits} ${get('slot')} ${get('bits')})
              (if (i32.or (i32.and ${get('bits')} (i32.const 8)) (i32.and ${get('bits')} (i32.sub ${get('bits')} (i32.const 1)))) (then
                (local.set $text (i32.const 1))
                (i32.store offset=${S.text} ${get('slot')} (i32.const 1))))))
          ;; column-state.ts: updateBounds, setLo, setHi.
          (local.set $k0 ${orderKey('w0')})
          (local.set $k1 ${orderKey('w1')})
          ${bound('lo', 'lt_s', 'loLen', 'loK0', 'loK1', 'lo')}
          ${bound('hi', 'gt_s', 'hiLen', 'hiK0', 'hiK1', 'hi')})
`)})

  ;; top(at, n) -> the largest of the n u32 at at (16 bytes past them may be read).
  (func (export "top") (param $at i32) (param $n i32) (result i32)
    (local $v v128) (local $end i32) (local $m i32) (local $x i32)
    (local.set $end (i32.add ${get('at')} (i32.shl (i32.and ${get('n')} (i32.const -4)) (i32.const 2))))
    (block $wide (loop $four
      (br_if $wide (i32.ge_u ${get('at')} ${get('end')}))
      (local.set $v (i32x4.max_u ${get('v')} (v128.load align=4 ${get('at')})))
      (local.set $at (i32.add ${get('at')} (i32.const 16)))
      (br $four)))
    (local.set $end (i32.add ${get('end')} (i32.shl (i32.and ${get('n')} (i32.const 3)) (i32.const 2))))
    (block $done (loop $one
      (br_if $done (i32.ge_u ${get('at')} ${get('end')}))
      (local.set $v (i32x4.max_u ${get('v')} (i32x4.splat (i32.load ${get('at')}))))
      (local.set $at (i32.add ${get('at')} (i32.const 4)))
      (br $one)))
    (local.set $m (i32x4.extract_lane 0 ${get('v')}))
    (local.set $x (i32x4.extract_lane 1 ${get('v')}))
    (if (i32.gt_u ${get('x')} ${get('m')}) (then (local.set $m ${get('x')})))
    (local.set $x (i32x4.extract_lane 2 ${get('v')}))
    (if (i32.gt_u ${get('x')} ${get('m')}) (then (local.set $m ${get('x')})))
    (local.set $x (i32x4.extract_lane 3 ${get('v')}))
    (if (i32.gt_u ${get('x')} ${get('m')}) (then (local.set $m ${get('x')})))
    ${get('m')})

  (func (export "exact") (param $slot i32) (param $table i32) (param $mask i32) (param $base i32) (param $fs i32) (param $fe i32)
        (param $fk i32) (param $W i32) (param $f i32) (param $i0 i32) (param $i1 i32) (result i32)
    (local $i i32) (local $k i32) (local $s i32) (local $len i32) (local $p i32) (local $h i32) (local $w i32)
    (local $w0 i32) (local $w1 i32) (local $w2 i32) (local $j i32) (local $out i32) (local $kd i32) (local $e i32) (local $at i32)
    ${eachValue(12, `          ;; value-counter.ts: ValueCounter.find, over the keys JavaScript registered (entries of 24 bytes:
          ;; hash, length + 1, three words, the key's index; counts after the entries).
          (local.set $e (i32.and ${get('h')} ${get('mask')}))
          (loop $probe
            (local.set $at (i32.add ${get('table')} (i32.mul ${get('e')} (i32.const ${EXACT_ENTRY_BYTES}))))
            (local.set $j (i32.load offset=4 ${get('at')}))
            (if (i32.eqz ${get('j')}) (then (return ${get('i')})))
            (if (i32.eq (i32.load ${get('at')}) ${get('h')}) (then
              (if (i32.eq ${get('j')} (i32.add ${get('len')} (i32.const 1))) (then
                (if (i32.eq (i32.load offset=8 ${get('at')}) ${get('w0')}) (then
                  (if (i32.eq (i32.load offset=12 ${get('at')}) ${get('w1')}) (then
                    (if (i32.eq (i32.load offset=16 ${get('at')}) ${get('w2')}) (then
                      (local.set $at (i32.add (i32.add ${get('table')} (i32.mul (i32.add ${get('mask')} (i32.const 1)) (i32.const ${EXACT_ENTRY_BYTES})))
                        (i32.shl (i32.load offset=20 ${get('at')}) (i32.const 2))))
                      (i32.store ${get('at')} (i32.add (i32.load ${get('at')}) (i32.const 1)))
                      ${addF(get('slot'), SLOT.count, f64(1))}
                      (br $next)))))))))))
            (local.set $e (i32.and (i32.add ${get('e')} (i32.const 1)) ${get('mask')}))
            (br $probe)))
`)}))
`;
}

export const wasm = wasmModule({
  script: 'scripts/stats-wasm.mjs', wat: 'src/core/stats.wat', what: "The column statistics' per-value work (see stats.wat)",
  constName: 'STATS_WASM_BASE64', text: wat, layoutName: 'STATS_LAYOUT', layout: LAYOUT, layoutDoc: LAYOUT_DOC,
});

if (process.argv[1] === fileURLToPath(import.meta.url)) await wasm.write();
