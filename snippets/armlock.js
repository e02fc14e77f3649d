/* armlock snippet: do not edit, render again */
// (the outer try: an engine without what the snippet needs at load, such as
// Function.prototype.bind, gets no snippet at all rather than an error thrown into the page)
try {
(function (w, d) {
  // Every value from the spec arrives in this one JSON literal (escaped by assign/snippet.py).
  var C = /*@CONFIG@*/null;
  // Role of each key of C: n experiment, f fingerprint, s salt, a arm names in order,
  // b their cumulative weights (basis points), x exposed arm names, k own cookie name, m Max-Age (s), o cookie domain, l data-layer name,
  // e event name, r error event name, g global object name, i id sources [[kind, name, pattern]],
  // c consent [key, value] or [function path] or null, q QA override parameter ("" = off),
  // t the bucket Python gives the experiment name (the self-test at load), u 1 when the shop's
  // server sets the id cookie (the snippet then only reads it).
  // The decision lives in these closure variables only; window[C.g] is a frozen read-only view.
  var dl, G, arm = null, forced = false, state = 'waiting', queue = [], hexDigits = '0123456789abcdef',
    toText = String, freeze = Object.freeze, U8 = w.Uint8Array, cr = w.crypto;
  // @hash-begin (tests run the code between these markers on the xxHash reference vectors)
  // Built-ins the hash, the arm and the gate use are taken once, here, at load. Bound copies
  // (f = call.bind(method), called as f(thisValue, args...)) look nothing up when called, so page
  // code that later patches a prototype or Function.prototype.call cannot reach them.
  var FP = Function.prototype, unbind = FP.bind.bind(FP.call), code = unbind(''.charCodeAt);
  // ---- unsigned 64-bit arithmetic on four 16-bit limbs, least significant first ----------
  // (every intermediate stays below 2^53, so plain doubles compute it exactly)
  function add(a, b) {
    for (var r = [], c = 0, i = 0; i < 4; i++) {
      c += a[i] + b[i];
      r[i] = c & 65535;
      c >>>= 16;
    }
    return r;
  }
  // product mod 2^64, schoolbook on limbs
  function mul(a, b) {
    for (var r = [0, 0, 0, 0], i = 0, j, c; i < 4; i++) {
      for (c = 0, j = 0; i + j < 4; j++) {
        c += r[i + j] + a[i] * b[j];
        r[i + j] = c & 65535;
        c = (c - r[i + j]) / 65536;
      }
    }
    return r;
  }
  function xor(a, b) {
    for (var r = [], i = 0; i < 4; i++) r[i] = a[i] ^ b[i];
    return r;
  }
  // rotate left by n bits (n not a multiple of 16)
  function rotl(a, n) {
    for (var r = [], q = n >> 4, m = n & 15, i = 0; i < 4; i++) {
      r[i] = (a[i - q + 4 & 3] << m | a[i - q + 3 & 3] >>> 16 - m) & 65535;
    }
    return r;
  }
  // x ^ (x >> n); limbs past the top read as 0
  function xsr(a, n) {
    for (var r = [], q = n >> 4, m = n & 15, i = 0; i < 4; i++) {
      r[i] = a[i] ^ (a[i + q] | a[i + q + 1] << 16) >>> m & 65535;
    }
    return r;
  }
  // a 64-bit constant from its 16 hex digits
  function hex(h) {
    for (var r = [], i = 0; i < 4; i++) r[i] = parseInt(h.substr(12 - 4 * i, 4), 16);
    return r;
  }
  // the n (4 or 8) little-endian bytes at b[i] as a 64-bit value
  function lane(b, i, n) {
    for (var r = [0, 0, 0, 0], j = 0; j < n; j += 2) r[j / 2] = b[i + j] | b[i + j + 1] << 8;
    return r;
  }
  // XXH64 primes (Collet, xxHash specification, "XXH64 Algorithm Description")
  var P1 = hex('9E3779B185EBCA87'), P2 = hex('C2B2AE3D27D4EB4F'), P3 = hex('165667B19E3779F9'),
    P4 = hex('85EBCA77C2B2AE63'), P5 = hex('27D4EB2F165667C5'), SEED = [42, 0, 0, 0], ZERO = [0, 0, 0, 0];
  function round(acc, v) {
    return mul(rotl(add(acc, mul(v, P2)), 31), P1);
  }
  function merge(acc, v) {
    return add(mul(xor(acc, round(ZERO, v)), P1), P4);
  }
  // UTF-8 bytes of a JS string (RFC 3629, section 3); a lone surrogate becomes U+FFFD, as
  // TextEncoder does (WHATWG Encoding Standard). An own loop over a charCodeAt taken at load, so
  // page code that patches String.prototype later cannot change the bytes that are hashed.
  function utf8(s) {
    for (var out = [], n = 0, i = 0, c, d, k; i < s.length; i++) {
      c = code(s, i);
      if (c > 55295 && c < 57344) {
        d = code(s, i + 1);
        if (c < 56320 && d > 56319 && d < 57344) {
          c = 65536 + (c - 55296) * 1024 + d - 56320;
          i++;
        } else {
          c = 65533;
        }
      }
      // k continuation bytes; the lead byte is 110xxxxx, 1110xxxx or 11110xxx for k = 1, 2, 3
      k = c < 128 ? 0 : c < 2048 ? 1 : c < 65536 ? 2 : 3;
      out[n++] = k ? 256 - (128 >> k) | c >> 6 * k : c;
      while (k--) out[n++] = 128 | c >> 6 * k & 63;
    }
    return out;
  }
  function xxh64(b) {
    var len = b.length, i = 0, acc, v1, v2, v3, v4;
    if (len >= 32) {
      // the four lanes start at seed + P1 + P2, seed + P2, seed, seed - P1 (mod 2^64)
      v1 = add(add(SEED, P1), P2);
      v2 = add(SEED, P2);
      v3 = SEED;
      v4 = add(SEED, add(xor(P1, hex('FFFFFFFFFFFFFFFF')), [1, 0, 0, 0]));
      for (; i + 32 <= len; i += 32) {
        v1 = round(v1, lane(b, i, 8));
        v2 = round(v2, lane(b, i + 8, 8));
        v3 = round(v3, lane(b, i + 16, 8));
        v4 = round(v4, lane(b, i + 24, 8));
      }
      acc = add(add(rotl(v1, 1), rotl(v2, 7)), add(rotl(v3, 12), rotl(v4, 18)));
      acc = merge(merge(merge(merge(acc, v1), v2), v3), v4);
    } else {
      acc = add(SEED, P5);
    }
    acc = add(acc, [len & 65535, len >>> 16, 0, 0]);
    for (; i + 8 <= len; i += 8) {
      acc = add(mul(rotl(xor(acc, round(ZERO, lane(b, i, 8))), 27), P1), P4);
    }
    if (i + 4 <= len) {
      acc = add(mul(rotl(xor(acc, mul(lane(b, i, 4), P1)), 23), P2), P3);
      i += 4;
    }
    for (; i < len; i++) {
      acc = mul(rotl(xor(acc, mul([b[i], 0, 0, 0], P5)), 11), P1);
    }
    return xsr(mul(xsr(mul(xsr(acc, 33), P2), 29), P3), 32);
  }
  // @hash-end
  var rand = cr && unbind(cr.getRandomValues);
  // bucket = ((h >> 32) * 10000) >> 32 on the top 32 bits; the product is exact in a double
  function bucketOf(id) {
    if (typeof id != 'string' || id === '') return null;
    var h = xxh64(utf8(C.s + ':' + id)), x = (h[3] * 65536 + h[2]) * 10000;
    return (x - x % 4294967296) / 4294967296;
  }
  // the first arm whose cumulative weight exceeds the bucket
  function armOf(id) {
    var b = bucketOf(id), i;
    for (i = 0; b !== null && i < C.b.length; i++) if (b < C.b[i]) return C.a[i];
    return null;
  }
  // whether a list holds v: an own loop, so a patched Array.prototype.indexOf cannot answer
  function has(list, v) {
    for (var i = 0; i < list.length; i++) if (list[i] === v) return 1;
    return 0;
  }
  // text of any thrown value, never throwing itself (a Symbol, an object without a prototype or
  // with a throwing toString gives its type instead)
  function text(e) {
    try {
      return toText(e && e.message || e);
    } catch (x) {
      return typeof e;
    }
  }
  // ---- page integration ---------------------------------------------------------------------
  // a dotted path such as "site.customer.key" read from an object, without eval
  function path(o, p) {
    var parts = p.split('.'), i;
    for (i = 0; o != null && i < parts.length; i++) o = o[parts[i]];
    return o;
  }
  // every value of a cookie, oldest first ([''] when absent): document.cookie joins pairs with
  // "; ", and with the same path the earlier-created cookie comes first (RFC 6265, 5.4)
  function cookies(name) {
    for (var parts = ('; ' + d.cookie).split('; ' + name + '='), out = [], i = 1; i < parts.length; i++) out[i - 1] = parts[i].split(';')[0];
    return i > 1 ? out : [''];
  }
  function getCookie(name) {
    return cookies(name)[0];
  }
  // an id that may go into a cookie as it is: the rule the server middleware keeps ids by
  function safe(v) {
    return /^[\w.\-]{1,128}$/.test(v);
  }
  // the latest value pushed into the data layer at a key path
  function fromLayer(p) {
    var v, i, e;
    for (i = 0; i < dl.length; i++) {
      e = dl[i];
      if (e && typeof e == 'object') {
        if (path(e, p) !== undefined) v = path(e, p);
      }
    }
    return v;
  }
  // RFC 9562 version-4 UUID from the browser's cryptographic random source (no fallback). It is
  // drawn twice: a source that left the buffer at zero, or gives the same bytes again, fails closed.
  function mint() {
    var b = new U8(16), c = new U8(16), s = '', i, any = 0, same = 1;
    rand(cr, b);
    rand(cr, c);
    for (i = 0; i < 16; i++) {
      any |= b[i];
      same &= b[i] == c[i];
    }
    if (!any || same) throw 'random source failed: ' + (any ? 'the same bytes twice' : 'no bytes');
    b[6] = b[6] & 15 | 64;
    b[8] = b[8] & 63 | 128;
    for (i = 0; i < 16; i++) s += (i == 4 || i == 6 || i == 8 || i == 10 ? '-' : '') + hexDigits[b[i] >> 4] + hexDigits[b[i] & 15];
    return s;
  }
  function store(name, v) {
    try {
      return v === undefined ? w.localStorage.getItem(name) : w.localStorage.setItem(name, v);
    } catch (e) {
      return null;
    }
  }
  // the visitor id. Set by the server (C.u): the first valid value of its cookie, never minted
  // here. Otherwise the first id this browser had: armlock's own cookie, its localStorage
  // mirror, then the configured sources in order, and finally a freshly minted id; an id from a
  // source is kept in the cookie, so a later login (a source that changes) never moves the visitor
  function visitorId() {
    var i, s, v, m, kept, own = getCookie(C.k), all;
    if (C.u) {
      for (all = cookies(C.k), i = 0; i < all.length; i++) if (safe(all[i])) return all[i];
      throw 'no server-set id in cookie ' + C.k;
    }
    kept = store(C.k);
    if (!safe(kept || '')) kept = '';
    for (i = 0; !own && !kept && i < C.i.length; i++) {
      s = C.i[i];
      v = s[0] == 'cookie' ? getCookie(s[1]) : s[0] == 'global' ? path(w, s[1]) : fromLayer(s[1]);
      if (typeof v == 'number' && v - v === 0) v = toText(v);
      if (typeof v == 'string' && s[2]) {
        m = new RegExp(s[2]).exec(v);
        v = m && m[1] || '';
      }
      if (typeof v == 'string' && v !== '') {
        // an id the cookie cannot hold as it is stays unkept: read from its source each time
        if (!safe(v)) return v;
        break;
      }
      v = '';
    }
    v = own || kept || v || mint();
    if (own !== v) {
      d.cookie = C.k + '=' + v + '; Path=/; Max-Age=' + C.m +
        (C.o ? '; Domain=' + C.o : '') + '; SameSite=Lax' + (w.location.protocol == 'https:' ? '; Secure' : '');
      if (getCookie(C.k) !== v) throw 'cookie not stored';
    }
    if (kept !== v) store(C.k, v);
    return v;
  }
  // QA override: ?<param>=<arm> forces that arm for this page view only; unknown arm = error.
  // A parameter that is not ours and does not decode (e.g. "100%") is skipped.
  function forcedArm() {
    var parts = C.q ? w.location.search.replace(/^\?/, '').split('&') : [], i, kv, v;
    for (i = 0; i < parts.length; i++) {
      kv = parts[i].split('=');
      try {
        v = decodeURIComponent(kv[0]) === C.q;
      } catch (e) {
        v = false;
      }
      if (v) {
        v = decodeURIComponent((kv[1] || '').replace(/\+/g, ' '));
        if (has(C.a, v)) return v;
        throw 'QA parameter: no such arm';
      }
    }
    return null;
  }
  function consented() {
    var f;
    if (!C.c) return 1;
    if (C.c.length == 1) {
      f = path(w, C.c[0]);
      return typeof f == 'function' && f() === true;
    }
    f = fromLayer(C.c[0]);
    return f != null && toText(f) === C.c[1];
  }
  function send(o) {
    try {
      dl.push(o);
    } catch (e) {}
  }
  function report(message) {
    send({event: C.r, armlock_experiment: C.n, armlock_error: message});
  }
  // one gated callback; whatever it throws is reported and stays inside this call
  function run(job) {
    try {
      if (has(job[1], arm)) job[0](arm);
    } catch (e) {
      report('callback: ' + text(e));
    }
  }
  function fail(e) {
    arm = null;
    state = 'failed';
    queue = [];
    report(text(e));
  }
  function decide() {
    var f = forcedArm(), a = f || armOf(visitorId());
    if (!a) throw 'no arm';
    arm = a;
    forced = !!f;
    state = 'ready';
    send({event: C.e, armlock_experiment: C.n, armlock_arm: a, armlock_fingerprint: C.f, armlock_forced: forced});
  }
  // decide once consent is there, then run the queued callbacks, each on its own
  // (the queue is emptied before any callback runs, so a re-entrant call never runs one twice)
  function check() {
    var jobs, i;
    try {
      if (state == 'waiting' && consented()) decide();
    } catch (e) {
      fail(e);
    }
    if (state == 'ready') {
      jobs = queue;
      queue = [];
      for (i = 0; i < jobs.length; i++) run(jobs[i]);
    }
  }
  // gate(callback[, arms]): run callback(arm) only for these arms (default: the exposed ones)
  function gate(cb, arms) {
    var job = [cb, arms == null ? C.x : typeof arms == 'string' ? [arms] : arms];
    if (state == 'ready') run(job);
    else if (state == 'waiting') queue[queue.length] = job;
  }
  // one call queued by the pre-load stub: its arguments (callback, arms)
  function queued(args) {
    if (args) gate(args[0], args[1]);
  }
  try {
    dl = w[C.l];
    if (dl == null) dl = w[C.l] = [];
    G = w[C.g];
    // loaded before on this page: the first copy stays in charge; a copy of another spec on the
    // same global only reports the clash (no cookie, no arm event, no gated callback)
    if (G && typeof G.fingerprint == 'string') {
      if (G.fingerprint !== C.f) report('global ' + C.g + ' holds fingerprint ' + G.fingerprint + ', this copy has ' + C.f);
      return;
    }
    var stub = G && G.q, i;
    G = {
      experiment: C.n, fingerprint: C.f,
      get arm() {
        return arm;
      },
      get state() {
        return state;
      },
      get forced() {
        return forced;
      },
      bucketOf: bucketOf, armOf: armOf, recheck: check, gate: gate,
      // a page that kept the stub's gate (it pushes into armlock.q) still reaches the real one
      q: {push: queued}
    };
    freeze(G.q);
    freeze(G);
    w[C.g] = G;
    for (i = 0; stub && i < stub.length; i++) queued(stub[i]);
    if (bucketOf(C.n) !== C.t) throw 'self-test failed: this page hashes differently';
    // consent by data layer: re-check on every push. A data layer that is not an object with a
    // push method is left exactly as the page made it
    if (C.c && typeof dl.push == 'function') {
      var push = dl.push;
      dl.push = function () {
        var out = push.apply(dl, arguments);
        check();
        return out;
      };
    }
    check();
  } catch (e) {
    fail(e);
  }
})(window, document);
} catch (e) {}
