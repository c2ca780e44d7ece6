// Updating the app itself: a new service worker installs beside the old one and waits while
// a bin is open; it takes over only once the bin is done, and the outbox comes through whole.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { cpSync, mkdtempSync, readFileSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { startServer, seedSite, ITEMS, ROOT } from "./harness.mjs";
import { launchPhone, signIn, controlled, scan, openBin, lines, outboxCount } from "./phone.mjs";

let server, web;

before(async () => {
  // A copy of the app, so the test can publish a "new version" of it.
  web = mkdtempSync(join(tmpdir(), "cairn-web-"));
  cpSync(join(ROOT, "client/web"), web, { recursive: true, filter: (p) => !p.includes("node_modules") });
  server = await startServer({ site: true, webDir: web });
  await seedSite(server);
});

after(() => {
  server?.stop();
  rmSync(web, { recursive: true, force: true });
});

const cacheNames = (page) => page.evaluate(() => caches.keys());

test("a new version waits while a bin is open and starts after it, keeping the outbox", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    await controlled(page);
    const [oldCache] = await cacheNames(page);
    assert.match(oldCache, /^cairn-shell-/);
    const list = await page.evaluate(async () => (await import("/app/js/db.js")).get("list"));
    await openBin(page, "A-01-01-1", list.tasks[0].label);
    await scan(page, ITEMS[0].each);
    await lines(page, 1);

    const sw = join(web, "sw.js");
    writeFileSync(sw, readFileSync(sw, "utf8").replace(/const VERSION = "[^"]*"/, 'const VERSION = "test-update"'));
    await page.evaluate(() => { globalThis.sameDocument = true; });
    await page.evaluate(async () => (await navigator.serviceWorker.getRegistration()).update());
    await page.waitForSelector("#update:not([hidden])");
    assert.equal(await page.evaluate(async () => Boolean((await navigator.serviceWorker.getRegistration()).waiting)), true,
      "the new worker is installed and waiting");
    // Asking for it now is refused while the bin is open: same page, same worker.
    await page.click("#update-now");
    assert.equal(await page.evaluate(async () => Boolean((await navigator.serviceWorker.getRegistration()).waiting)), true);
    assert.equal(await page.evaluate(() => globalThis.sameDocument), true, "no reload in the middle of a bin");
    assert.match(await page.textContent("#bin-title"), /^Counting A-01-01-1/);

    // Offline from here: the switch needs no network, and what was counted must stay queued.
    await browser.context.setOffline(true);
    const reloaded = page.waitForEvent("load");
    await page.click("#bin-done");
    await reloaded;
    await page.waitForSelector("#today:not([hidden])");
    assert.equal(await page.evaluate(() => globalThis.sameDocument), undefined, "the page restarted on the new version");
    assert.deepEqual(await cacheNames(page), ["cairn-shell-test-update"], "the old cache is gone");
    assert.ok(await outboxCount(page) >= 1, "bin_done, made just before the switch, is still queued");
    assert.match(await page.textContent("#today-progress"), /1 of 3 bins done/);
    // Back online, everything counted before and across the switch reaches the server.
    await browser.context.setOffline(false);
    await page.waitForFunction(() => document.getElementById("waiting").textContent === "0 waiting"
      && document.body.dataset.syncing !== "yes");
    assert.equal(await outboxCount(page), 0);
    const got = (await server.api("GET", "/api/v1/sites/T/count-lines")).lines.filter((l) => l.bin === "A-01-01-1");
    assert.deepEqual(got.map((l) => [l.sku, l.qty]), [[ITEMS[0].sku, 1]]);
    const day = await server.api("GET", `/api/v1/sites/T/count-lists/${list.day}`);
    assert.equal(day.tasks.find((t) => t.bin === "A-01-01-1").status, "done", "bin_done arrived");
  } finally {
    await browser.close();
  }
});
