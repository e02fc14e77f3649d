// Runs a rendered armlock snippet in a Node `vm` context with a stubbed window and document.
// Reads one JSON request on stdin, prints one JSON answer on stdout. Request keys:
//   snippet: the snippet source (js form); ids: ids to compute bucketOf/armOf for;
//   cookie: initial document.cookie; cookieThrows: document.cookie throws on access;
//   cookieIgnored: cookie writes are silently dropped (cookies disabled); noCrypto: no window.crypto;
//   search: location.search; protocol: location.protocol; storage: initial localStorage;
//   globals: extra properties of window (JSON values); before: data-layer entries pushed first;
//   after: data-layer entries pushed after the snippet ran; gate: [[arms or null], ...] calls
//   of gate() made right after the snippet ran (each records whether its callback ran);
//   consentAfter: after the snippet ran, set window[name] = function returning true, then recheck;
//   pre: page script run before the snippet; again: snippet sources run after the first one
//   (a second tag); post: page script run last; probe: an expression whose JSON value is returned;
//   random: "zero" (getRandomValues leaves the buffer as it is) or "repeat" (same bytes each call).
// Page scripts run in the same context as the snippet, whose global object is `window`, so
// bare names (armlock, Array.prototype...) mean what they mean in a page. An exception of a page
// script is recorded in scriptErrors, as a browser reports it, and the next script still runs.
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
  var sandbox = Object.assign({}, req.globals || {});
  var ctx = vm.createContext(sandbox);
  var window = vm.runInContext('this', ctx);
  sandbox.window = window;
  sandbox.document = document;
  window.location = {protocol: req.protocol || 'https:', search: req.search || ''};
  window.localStorage = {
    getItem: function (k) { return Object.prototype.hasOwnProperty.call(store, k) ? store[k] : null; },
    setItem: function (k, v) { store[k] = String(v); }
  };
  var fixed = nodeCrypto.randomBytes(16);
  if (!req.noCrypto) window.crypto = {getRandomValues: function (b) {
    if (req.random === 'zero') return b;
    var r = req.random === 'repeat' ? fixed : nodeCrypto.randomBytes(b.length);
    for (var i = 0; i < b.length; i++) b[i] = r[i];
    return b;
  }};
  if (req.before) window.dataLayer = req.before.slice();
  var scriptErrors = [];
  function page(src, name) {
    try {
      vm.runInContext(src, ctx, {filename: name});
    } catch (e) {
      scriptErrors.push(name + ': ' + String(e));
    }
  }
  if (req.pre) page(req.pre, 'pre.js');
  var pageError = null;
  try {
    vm.runInContext(req.snippet, ctx, {filename: 'snippet.js'});
  } catch (e) {
    pageError = String(e);
  }
  (req.again || []).forEach(function (src, i) { page(src, 'again' + i + '.js'); });
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
  if (req.post) page(req.post, 'post.js');
  var out = {
    pageError: pageError, scriptErrors: scriptErrors,
    probe: req.probe ? JSON.parse(JSON.stringify(vm.runInContext(req.probe, ctx)) || 'null') : null,
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
