// Runs a rendered armlock snippet in a Node `vm` context with a stubbed window and document.
// Reads one JSON request on stdin, prints one JSON answer on stdout. Request keys:
//   snippet: the snippet source (js form); ids: ids to compute bucketOf/armOf for;
//   cookie: initial document.cookie; cookieThrows: document.cookie throws on access;
//   cookieIgnored: cookie writes are silently dropped (cookies disabled); noCrypto: no window.crypto;
//   search: location.search; protocol: location.protocol; storage: initial localStorage;
//   globals: extra properties of window (JSON values); before: data-layer entries pushed first;
//   after: data-layer entries pushed after the snippet ran; gate: [[arms or null], ...] calls
//   of gate() made right after the snippet ran (each records whether its callback ran);
//   consentAfter: after the snippet ran, set window[name] = function returning true, then recheck.
'use strict';
var vm = require('vm');
var nodeCrypto = require('crypto');

function main(req) {
  var jar = {};
  (req.cookie || '').split('; ').forEach(function (kv) {
    if (kv) jar[kv.split('=')[0]] = kv.slice(kv.indexOf('=') + 1);
  });
  var writes = [];
  var document = {};
  Object.defineProperty(document, 'cookie', {
    get: function () {
      if (req.cookieThrows) throw new Error('cookies are blocked');
      return Object.keys(jar).map(function (k) { return k + '=' + jar[k]; }).join('; ');
    },
    set: function (v) {
      if (req.cookieThrows) throw new Error('cookies are blocked');
      writes.push(v);
      if (req.cookieIgnored) return;
      var first = v.split(';')[0];
      jar[first.split('=')[0]] = first.slice(first.indexOf('=') + 1);
    }
  });
  var store = Object.assign({}, req.storage || {});
  var window = Object.assign({}, req.globals || {});
  window.location = {protocol: req.protocol || 'https:', search: req.search || ''};
  window.localStorage = {
    getItem: function (k) { return Object.prototype.hasOwnProperty.call(store, k) ? store[k] : null; },
    setItem: function (k, v) { store[k] = String(v); }
  };
  if (!req.noCrypto) window.crypto = {getRandomValues: function (b) {
    var r = nodeCrypto.randomBytes(b.length);
    for (var i = 0; i < b.length; i++) b[i] = r[i];
    return b;
  }};
  if (req.before) window.dataLayer = req.before.slice();
  var ctx = vm.createContext({window: window, document: document});
  var pageError = null;
  try {
    vm.runInContext(req.snippet, ctx, {filename: 'snippet.js'});
  } catch (e) {
    pageError = String(e);
  }
  var g = window[req.global || 'armlock'];
  var ran = [];
  (req.gate || []).forEach(function (arms, i) {
    ran[i] = false;
    g.gate(function () { ran[i] = true; }, arms === null ? undefined : arms);
  });
  (req.after || []).forEach(function (e) { window[req.dataLayer || 'dataLayer'].push(e); });
  if (req.consentAfter) {
    window[req.consentAfter] = function () { return true; };
    g.recheck();
  }
  var out = {
    pageError: pageError,
    arm: g ? g.arm : null, forced: g ? g.forced : null, state: g ? g.state : null,
    experiment: g ? g.experiment : null, fingerprint: g ? g.fingerprint : null,
    dataLayer: JSON.parse(JSON.stringify(window[req.dataLayer || 'dataLayer'] || null)),
    cookieWrites: writes, cookies: jar, storage: store, gateRan: ran
  };
  if (req.ids) {
    out.buckets = req.ids.map(function (id) { return g.bucketOf(id); });
    out.arms = req.ids.map(function (id) { return g.armOf(id); });
  }
  return out;
}

var chunks = [];
process.stdin.on('data', function (c) { chunks.push(c); });
process.stdin.on('end', function () {
  process.stdout.write(JSON.stringify(main(JSON.parse(Buffer.concat(chunks).toString('utf8')))));
});
