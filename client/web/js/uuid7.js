// UUIDv7 (RFC 9562 §5.7): 48-bit Unix time in ms, version 7, 12 bits that count up within
// one millisecond (§6.2 method 1, so ids made by this page sort in the order they were
// made), the variant bits 10, then 62 random bits.

let lastMs = -1;
let seq = 0;

/** Returns a new UUIDv7 string for the instant `now` (ms since the epoch). */
export function uuid7(now = Date.now()) {
  let ms = Math.floor(now);
  if (ms <= lastMs) {
    ms = lastMs;
    seq += 1;
    if (seq > 0xfff) {
      ms += 1;
      seq = 0;
    }
  } else {
    // Start low in the 12-bit field so a burst within the same ms has room to count.
    seq = crypto.getRandomValues(new Uint16Array(1))[0] & 0x3ff;
  }
  lastMs = ms;
  const b = crypto.getRandomValues(new Uint8Array(16));
  for (let i = 5; i >= 0; i--) {
    b[i] = ms % 256;
    ms = Math.floor(ms / 256);
  }
  b[6] = 0x70 | (seq >> 8);
  b[7] = seq & 0xff;
  b[8] = 0x80 | (b[8] & 0x3f);
  const h = [...b].map((x) => x.toString(16).padStart(2, "0")).join("");
  return `${h.slice(0, 8)}-${h.slice(8, 12)}-${h.slice(12, 16)}-${h.slice(16, 20)}-${h.slice(20)}`;
}

/** Reads the millisecond timestamp back out of a UUIDv7. */
export function uuid7Time(id) {
  return parseInt(id.replaceAll("-", "").slice(0, 12), 16);
}
