/* armlock server module: do not edit, render again (armlock snippet --form module) */
// The assignment contract (shared/CONTRACT.md) and the server-set id cookie's rule
// (docs/identity.md) for Node and edge/worker runtimes. It uses only ECMAScript (BigInt,
// DataView) and two web platform globals that Node 19+ and worker runtimes both have:
// TextEncoder and crypto.randomUUID. No Node-only API, so it runs in a worker as it is.

// Every value from the spec arrives in this one JSON literal (written by assign/module.py):
// experiment, fingerprint, salt, arms (names in order), cumulative (their cumulative weights in
// basis points), exposed (names of the exposed arms), cookie {name, domain, maxAge}.
export const config = Object.freeze(/*@CONFIG@*/null);

// ---- XXH64 on BigInt (Collet, xxHash specification, "XXH64 Algorithm Description") ----------
const MASK = (1n << 64n) - 1n;
const P1 = 0x9E3779B185EBCA87n;
const P2 = 0xC2B2AE3D27D4EB4Fn;
const P3 = 0x165667B19E3779F9n;
const P4 = 0x85EBCA77C2B2AE63n;
const P5 = 0x27D4EB2F165667C5n;
export const SEED = 42n; // Apache Spark's xxhash64() seed (shared/CONTRACT.md)

const rotl = (x, r) => ((x << r) | (x >> (64n - r))) & MASK;
const round = (acc, lane) => (rotl((acc + lane * P2) & MASK, 31n) * P1) & MASK;
const merge = (acc, v) => (((acc ^ round(0n, v)) * P1) + P4) & MASK;

/** XXH64 of a Uint8Array with a seed (default 42), as an unsigned 64-bit BigInt. */
export function xxh64(bytes, seed = SEED) {
  const view = new DataView(bytes.buffer, bytes.byteOffset, bytes.byteLength);
  const len = bytes.length;
  let i = 0;
  let acc;
  if (len >= 32) {
    let v1 = (seed + P1 + P2) & MASK;
    let v2 = (seed + P2) & MASK;
    let v3 = seed;
    let v4 = (seed - P1) & MASK;
    for (; i + 32 <= len; i += 32) {
      v1 = round(v1, view.getBigUint64(i, true));
      v2 = round(v2, view.getBigUint64(i + 8, true));
      v3 = round(v3, view.getBigUint64(i + 16, true));
      v4 = round(v4, view.getBigUint64(i + 24, true));
    }
    acc = (rotl(v1, 1n) + rotl(v2, 7n) + rotl(v3, 12n) + rotl(v4, 18n)) & MASK;
    acc = merge(merge(merge(merge(acc, v1), v2), v3), v4);
  } else {
    acc = (seed + P5) & MASK;
  }
  acc = (acc + BigInt(len)) & MASK;
  for (; i + 8 <= len; i += 8) {
    acc = ((rotl(acc ^ round(0n, view.getBigUint64(i, true)), 27n) * P1) + P4) & MASK;
  }
  if (i + 4 <= len) {
    acc = ((rotl(acc ^ ((BigInt(view.getUint32(i, true)) * P1) & MASK), 23n) * P2) + P3) & MASK;
    i += 4;
  }
  for (; i < len; i++) {
    acc = (rotl(acc ^ ((BigInt(bytes[i]) * P5) & MASK), 11n) * P1) & MASK;
  }
  acc = ((acc ^ (acc >> 33n)) * P2) & MASK;
  acc = ((acc ^ (acc >> 29n)) * P3) & MASK;
  return acc ^ (acc >> 32n);
}

// ---- the contract: key -> hash -> bucket -> arm -----------------------------------------------
const encoder = new TextEncoder(); // UTF-8; a lone surrogate becomes U+FFFD (WHATWG Encoding)

/** XXH64 (seed 42) of UTF-8(salt + ":" + id), as an unsigned BigInt. */
export function hash64(salt, id) {
  return xxh64(encoder.encode(salt + ':' + id));
}

/** The bucket in [0, 10000): ((h >> 32) * 10000) >> 32; null for an empty or missing id. */
export function bucketOf(salt, id) {
  if (typeof id !== 'string' || id === '') return null;
  return Number(((hash64(salt, id) >> 32n) * 10000n) >> 32n);
}

/** The first arm whose cumulative weight exceeds the bucket (null for an empty id). */
export function armFor(id, spec = config) {
  const b = bucketOf(spec.salt, id);
  if (b === null) return null;
  for (let i = 0; i < spec.cumulative.length; i++) if (b < spec.cumulative[i]) return spec.arms[i];
  return null;
}

// ---- the id cookie's rule (the same as armlock.assign.identity) --------------------------------
const VALID_ID = /^[A-Za-z0-9_.\-]{1,128}$/;
export const MAX_AGE = 400 * 86400; // RFC 6265bis caps cookie lifetimes at 400 days

/** Whether a cookie value is an id the server keeps (1-128 of A-Z a-z 0-9 _ . -). */
export function validId(value) {
  return typeof value === 'string' && VALID_ID.test(value);
}

/** Every value of cookie `name` in a Cookie request header, oldest first (RFC 6265, 5.4). */
export function cookieValues(header, name) {
  const out = [];
  for (const part of String(header || '').split(';')) {
    const eq = part.indexOf('=');
    if (eq >= 0 && part.slice(0, eq).trim() === name) out.push(part.slice(eq + 1).trim());
  }
  return out;
}

/** The visitor's id: the first valid value of the id cookie, or null. */
export function readId(header, name = config.cookie.name) {
  return cookieValues(header, name).find(validId) ?? null;
}

/** A random RFC 9562 version-4 UUID from the runtime's cryptographic generator. */
export function mintId() {
  return globalThis.crypto.randomUUID();
}

/** The Set-Cookie header value: Max-Age 400 days, Path=/, SameSite=Lax, Secure on https, no HttpOnly. */
export function setCookie(id, { https, cookie = config.cookie } = {}) {
  if (!validId(id)) throw new Error('not a valid id for a cookie: ' + JSON.stringify(id));
  return cookie.name + '=' + id + '; Max-Age=' + cookie.maxAge + '; Path=/' +
    (cookie.domain ? '; Domain=' + cookie.domain : '') + '; SameSite=Lax' + (https ? '; Secure' : '');
}

/** Whether a Content-Type is an HTML page (where the id cookie is set). */
export function isHtml(contentType) {
  const media = String(contentType || '').split(';')[0].trim().toLowerCase();
  return media === 'text/html' || media === 'application/xhtml+xml';
}

/**
 * The visitor of one request: its kept id or a new one, and its arm.
 * Without consent: no id, no arm, no cookie. `setCookie` is the header value to send with an
 * HTML response (refresh it on every page view; never overwrite a valid id).
 */
export function visitor(cookieHeader, { https = false, consented = true } = {}) {
  if (!consented) return { id: null, new: false, arm: null, consented: false, setCookie: null };
  const kept = readId(cookieHeader);
  const id = kept ?? mintId();
  return { id, new: kept === null, arm: armFor(id), consented: true, setCookie: setCookie(id, { https }) };
}
