// Updating the app itself. Build A is the app compiled into the binary; build B is the same
// server restarted on the same address and database with one shell file changed (served
// through the development folder, whose worker is stamped by the same hash rule). Nobody
// edits a version string: the worker's cache name follows the files. The phone installs B
// only once the open bin is done, and the counts it held unsent across the switch arrive.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { appendFileSync, cpSync, mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { startServer, seedSite, ITEMS, ROOT } from "./harness.mjs";
import { launchPhone, signIn, controlled, scan, openBin, lines, outboxCount } from "./phone.mjs";

/** A line added to build B's stylesheet: the one change between the two builds. */
const B_MARK = "/* build B */\n";

let server, web;

before(async () => {
  web = mkdtempSync(join(tmpdir(), "cairn-web-b-"));
  cpSync(join(ROOT, "client/web"), web, { recursive: true, filter: (p) => !p.includes("node_modules") });
  appendFileSync(join(web, "app.css"), B_MARK);
  server = await startServer({ site: true });
  await seedSite(server);
});

after(async () => {
  await server?.stop();
  rmSync(web, { recursive: true, force: true });
});

const cacheNames = (page) => page.evaluate(() => caches.keys());

/** The cache name the server's sw.js carries now. */
async function servedCacheName() {
  const sw = await (await fetch(`${server.url}/app/sw.js`)).text();
  const hash = sw.match(/const SHELL_HASH = "([0-9a-f]{16})"/);
  assert.ok(hash, "sw.js carries a 16-hex-digit hash of the app's files");
  return `cairn-shell-${hash[1]}`;
}

const waiting = (page) => page.evaluate(async () => Boolean((await navigator.serviceWorker.getRegistration()).waiting));

test("build B waits while a bin is open and starts after it, keeping the unsent counts", async () => {
  const cacheA = await servedCacheName();
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    await controlled(page);
    assert.deepEqual(await cacheNames(page), [cacheA], "build A is installed under its hash");
    const list = await page.evaluate(async () => (await import("/app/js/db.js")).get("list"));
    await openBin(page, "A-01-01-1", list.tasks[0].label);

    // The server goes away; the count made now can only wait in the outbox.
    await server.halt();
    await scan(page, ITEMS[0].each);
    await lines(page, 1);
    assert.ok(await outboxCount(page) >= 1, "the count is held unsent");

    // Build B comes up at the same address; the phone looks for a new worker.
    await server.resume({ webDir: web });
    const cacheB = await servedCacheName();
    assert.notEqual(cacheB, cacheA, "a changed shell file is a new cache name, with nothing edited by hand");
    await page.evaluate(() => { globalThis.sameDocument = true; });
    await page.evaluate(async () => (await navigator.serviceWorker.getRegistration()).update());
    await page.waitForSelector("#update:not([hidden])");
    assert.equal(await waiting(page), true, "build B's worker is installed and waiting");
    // Asking for it now is refused while the bin is open: same page, same worker, A's files.
    await page.click("#update-now");
    assert.equal(await waiting(page), true);
    assert.equal(await page.evaluate(() => globalThis.sameDocument), true, "no reload in the middle of a bin");
    assert.match(await page.textContent("#bin-title"), /^Counting A-01-01-1/);
    assert.equal(await page.evaluate(async () => (await (await fetch("/app/app.css")).text()).endsWith("/* build B */\n")),
      false, "the open bin still runs on build A");

    // Offline from here: the switch needs no network, and what was counted must stay queued.
    await browser.context.setOffline(true);
    const reloaded = page.waitForEvent("load");
    await page.click("#bin-done");
    await reloaded;
    await page.waitForSelector("#today:not([hidden])");
    assert.equal(await page.evaluate(() => globalThis.sameDocument), undefined, "the page restarted on build B");
    assert.deepEqual(await cacheNames(page), [cacheB], "build A's cache is gone");
    assert.equal(await page.evaluate(async () => (await (await fetch("/app/app.css")).text()).endsWith("/* build B */\n")),
      true, "build B's files run, from its cache while offline");
    // The phone may have sent the count to build B on a retry already; bin_done, made
    // offline just before the switch, must still be queued.
    assert.ok(await outboxCount(page) >= 1, "bin_done is still queued across the switch");
    assert.match(await page.textContent("#today-progress"), /1 of 3 bins done/);
    // Back online, everything counted before and across the switch reaches build B's server.
    await browser.context.setOffline(false);
    await page.waitForFunction(() => document.getElementById("waiting").textContent === "0 waiting"
      && document.body.dataset.syncing !== "yes", null, { timeout: 20_000 });
    assert.equal(await outboxCount(page), 0);
    const got = (await server.api("GET", "/api/v1/sites/T/count-lines")).lines.filter((l) => l.bin === "A-01-01-1");
    assert.deepEqual(got.map((l) => [l.sku, l.qty]), [[ITEMS[0].sku, 1]]);
    const day = await server.api("GET", `/api/v1/sites/T/count-lists/${list.day}`);
    assert.equal(day.tasks.find((t) => t.bin === "A-01-01-1").status, "done", "bin_done arrived");
  } finally {
    await browser.close();
  }
});
