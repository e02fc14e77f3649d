// A minimal Node `http` server with armlock's server-set id (docs/identity.md). Invented example.
//   armlock snippet --spec spring-retargeting.toml --form module --out armlock-server.mjs
//   node node-http-server.mjs 8080
// Every HTML page view keeps the visitor's id (or mints one), sets the id cookie from the server
// for 400 days, and knows the visitor's arm before the page is written.
import http from 'node:http';
import { config, isHtml, visitor } from './armlock-server.mjs';

// Replace with your consent rule (for example, read your consent manager's cookie).
const hasConsent = (req) => true;

const server = http.createServer((req, res) => {
  const https = req.headers['x-forwarded-proto'] === 'https'; // behind a proxy that ends TLS
  const v = visitor(req.headers.cookie, { https, consented: hasConsent(req) });
  const type = 'text/html; charset=utf-8';
  res.setHeader('Content-Type', type);
  res.setHeader('Cache-Control', 'private'); // never let a shared cache hand one id to many
  if (v.setCookie && isHtml(type)) res.setHeader('Set-Cookie', v.setCookie);
  const vendorTag = config.exposed.includes(v.arm) ? '<!-- the vendor tag goes here -->' : '';
  res.end(`<!doctype html><title>shop.example (invented)</title>` +
          `<p data-arm="${v.arm ?? ''}">${config.experiment}: ${v.arm ?? 'not in the test'}</p>${vendorTag}`);
});

server.listen(Number(process.argv[2] ?? 8080), '127.0.0.1', () => {
  console.log(String(server.address().port)); // the port, for whoever started it
});
