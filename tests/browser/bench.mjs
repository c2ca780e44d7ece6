// Phone-app figures for README's performance section (not part of the test run):
//   CAIRN_BIN=… node bench.mjs [--scans N] [--events N]
// 1. keystroke-end to line committed in IndexedDB, over N scans typed as a wedge scanner;
// 2. N queued events: time until the server has answered them all;
// 3. bytes of the first load (shell + scan wasm), as sent and gzip-compressed.
import { gzipSync, brotliCompressSync } from "node:zlib";
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { startServer, seedSite, ITEMS, ROOT } from "./harness.mjs";
import { launchPhone, signIn, controlled, openBin, lines, outboxCount } from "./phone.mjs";

const arg = (name, dflt) => {
  const i = process.argv.indexOf(`--${name}`);
  return i > 0 ? Number(process.argv[i + 1]) : dflt;
};
const SCANS = arg("scans", 250);
const EVENTS = arg("events", 5000);

const pct = (xs, p) => {
  const s = [...xs].sort((a, b) => a - b);
  return s[Math.min(s.length - 1, Math.ceil((p / 100) * s.length) - 1)];
};
const kb = (n) => `${(n / 1024).toFixed(1)} KiB`;

const server = await startServer({ site: true });
await seedSite(server);
const browser = await launchPhone();
try {
  // 3. First load: every response of the first visit, as the server sent it.
  const page = await browser.context.newPage();
  const loaded = new Map();
  page.on("response", async (r) => {
    const u = new URL(r.url());
    if (!u.pathname.startsWith("/app/") || r.request().method() !== "GET") return;
    try {
      loaded.set(u.pathname, { body: await r.body(), encoding: r.headers()["content-encoding"] ?? "identity" });
    } catch { /* a redirect has no body */ }
  });
  await signIn(page, server);
  await controlled(page);
  const sw = readFileSync(join(ROOT, "client/web/sw.js"), "utf8");
  const shell = JSON.parse(`[${sw.match(/const SHELL = \[([^\]]*)\]/)[1].replace(/,\s*$/, "")}]`.replaceAll("\n", ""));
  let raw = 0, gz = 0, br = 0;
  const rows = [];
  for (const p of shell) {
    const file = join(ROOT, "client/web", p === "./" ? "index.html" : p);
    const body = readFileSync(file);
    raw += body.length;
    gz += gzipSync(body).length;
    br += brotliCompressSync(body).length;
    rows.push([p, body.length]);
  }
  const wire = [...loaded.values()].reduce((s, x) => s + x.body.length, 0);
  const encodings = [...new Set([...loaded.values()].map((x) => x.encoding))];
  const camera = readFileSync(join(ROOT, "client/web/pkg/cairn_camera_bg.wasm"));
  console.log(`first load: ${loaded.size} files under /app/, ${kb(wire)} as received (content-encoding: ${encodings.join(", ")})`);
  console.log(`shell (${shell.length} files): raw ${kb(raw)}, gzip ${kb(gz)}, brotli ${kb(br)} (computed locally)`);
  console.log(`  largest: ${rows.sort((a, b) => b[1] - a[1]).slice(0, 3).map(([p, n]) => `${p} ${kb(n)}`).join(", ")}`);
  console.log(`camera decoder (loaded only when the camera opens): raw ${kb(camera.length)}, gzip ${kb(gzipSync(camera).length)}`);

  // 1. Keystroke-end to the line on disk.
  const list = await page.evaluate(() => new Promise((ok) => {
    const r = indexedDB.open("cairn-phone");
    r.onsuccess = () => { const g = r.result.transaction("kv").objectStore("kv").get("list"); g.onsuccess = () => ok(g.result); };
  }));
  const task = list.tasks[0];
  await openBin(page, task.bin, task.label);
  for (let i = 0; i < SCANS; i++) {
    await page.keyboard.type(ITEMS[0].each, { delay: 2 });
    await page.keyboard.press("Enter");
    await lines(page, i + 1); // one scan at a time, as a counter works
  }
  const t = await page.evaluate(() => performance.getEntriesByName("cairn:scan-to-disk").map((e) => e.duration));
  console.log(`scan to disk over ${t.length} scans: median ${pct(t, 50).toFixed(2)} ms, p95 ${pct(t, 95).toFixed(2)} ms, max ${Math.max(...t).toFixed(2)} ms`);
  await page.click("#bin-done").catch(() => {});
  await page.waitForFunction(() => document.getElementById("waiting").textContent === "0 waiting", null, { timeout: 120_000 });

  // 2. Many queued events: queue offline, then time from reconnecting to an empty outbox.
  await browser.context.setOffline(true);
  const t2 = list.tasks[1];
  const queued = await page.evaluate(async ({ task, sku, gtin, n }) => {
    const db = await import("/app/js/db.js");
    const { uuid7 } = await import("/app/js/uuid7.js");
    const count = uuid7();
    await db.record({ id: count, at: Date.now(), count, task: task.id, bin: task.bin, type: "bin_opened", label: task.label });
    for (let i = 1; i < n; i++) {
      await db.record({ id: uuid7(), at: Date.now(), count, task: task.id, bin: task.bin, type: "line",
        sku, gtin, packs: 1, qty: 1, lot: "", expiry: null, entry: "scan" });
    }
    return db.outboxCount();
  }, { task: t2, sku: ITEMS[1].sku, gtin: ITEMS[1].each, n: EVENTS });
  const started = performance.now();
  await browser.context.setOffline(false);
  // Events queued behind the app's back are not on its counter, so ask the disk itself.
  while ((await outboxCount(page)) > 0) await new Promise((r) => setTimeout(r, 20));
  const ms = performance.now() - started;
  console.log(`sync of ${queued} queued events: ${(ms / 1000).toFixed(2)} s (${Math.round(queued / (ms / 1000))} events/s), ${await outboxCount(page)} left`);
} finally {
  await browser.close();
  await server.stop();
}
