// The phone app's service worker: keeps the app shell and the scan rules (wasm) in a
// versioned cache so the app starts with no connection, and sends the outbox by Background
// Sync where the browser has it. A new version installs beside the old one and waits; the
// page tells it to take over only when no bin is open. IndexedDB (the outbox) is never
// touched here except to send it.

import { syncOutbox } from "./js/sync.js";

/** The hash of every file of the app, written here by the server (set when the binary is
 * built): any change to the shell is a new cache, so a new version, with nothing to edit. */
const SHELL_HASH = "__CAIRN_SHELL_HASH__";
const CACHE = `cairn-shell-${SHELL_HASH}`;
const SHELL = [
  "./", "app.css", "manifest.webmanifest",
  "icons/icon.svg", "icons/icon-192.png", "icons/icon-512.png",
  "js/app.js", "js/db.js", "js/sync.js", "js/uuid7.js", "js/scanner.js", "js/feedback.js",
  "js/camera.js", "js/count.js",
  "pkg/cairn_scan.js", "pkg/cairn_scan_bg.wasm",
];

self.addEventListener("install", (event) => {
  event.waitUntil(caches.open(CACHE).then((c) => c.addAll(SHELL.map((p) => new Request(p, { cache: "reload" })))));
});

self.addEventListener("activate", (event) => {
  event.waitUntil((async () => {
    for (const key of await caches.keys()) if (key.startsWith("cairn-shell-") && key !== CACHE) await caches.delete(key);
    await self.clients.claim();
  })());
});

self.addEventListener("message", (event) => {
  if (event.data?.type === "skip-waiting") self.skipWaiting();
});

self.addEventListener("fetch", (event) => {
  const req = event.request;
  const url = new URL(req.url);
  const scope = new URL(self.registration.scope);
  if (req.method !== "GET" || url.origin !== scope.origin || !url.pathname.startsWith(scope.pathname)) return;
  event.respondWith((async () => {
    const cache = await caches.open(CACHE);
    const key = req.mode === "navigate" && url.pathname === scope.pathname ? "./" : req;
    const hit = await cache.match(key, { ignoreSearch: true });
    if (hit) return hit;
    const res = await fetch(req);
    // Files not in the shell (the camera decoder, the label-check page) are kept once seen.
    if (res.ok) cache.put(req, res.clone());
    return res;
  })());
});

self.addEventListener("sync", (event) => {
  if (event.tag !== "cairn-outbox") return;
  event.waitUntil((async () => {
    const outcome = await syncOutbox();
    for (const c of await self.clients.matchAll({ type: "window" })) c.postMessage({ type: "synced", state: outcome.state });
    if (outcome.state === "offline") throw new Error("no connection yet: the browser retries later");
  })());
});
