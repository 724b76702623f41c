/**
 * Index of the first byte that starts an ill-formed UTF-8 sequence, or −1 when all of `bytes` is well formed.
 * Well-formed sequences per RFC 3629 §4 (no overlong forms, no surrogates, nothing above U+10FFFF).
 */
export function firstInvalidUtf8(bytes: Uint8Array): number {
  const n = bytes.length;
  let i = 0;
  while (i < n) {
    const b0 = bytes[i]!;
    if (b0 < 0x80) {
      i++;
      continue;
    }
    let length: number;
    let lo = 0x80;
    let hi = 0xbf;
    if (b0 >= 0xc2 && b0 <= 0xdf) length = 2;
    else if (b0 >= 0xe0 && b0 <= 0xef) {
      length = 3;
      if (b0 === 0xe0) lo = 0xa0;
      if (b0 === 0xed) hi = 0x9f;
    } else if (b0 >= 0xf0 && b0 <= 0xf4) {
      length = 4;
      if (b0 === 0xf0) lo = 0x90;
      if (b0 === 0xf4) hi = 0x8f;
    } else return i;
    if (i + length > n) return i;
    const b1 = bytes[i + 1]!;
    if (b1 < lo || b1 > hi) return i;
    for (let k = 2; k < length; k++) {
      const b = bytes[i + k]!;
      if (b < 0x80 || b > 0xbf) return i;
    }
    i += length;
  }
  return -1;
}
