// The app shell: sign-in once online, the caution screen, today's list, and a start with
// no connection at all (served by the service worker from its cache).
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { startServer, seedSite, COUNTER, ITEMS } from "./harness.mjs";
import { launchPhone, signIn, controlled, openBin, scan } from "./phone.mjs";

let server;

before(async () => {
  server = await startServer({ site: true });
  await seedSite(server);
});

after(() => server?.stop());

test("after one sign-in online, the app starts offline with today's list in walking order", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    const bins = await page.$$eval("#today-list .task", (els) => els.map((e) => e.dataset.bin));
    assert.deepEqual(bins, ["A-01-01-1", "A-01-02-1", "A-01-03-1"]);
    assert.match(await page.textContent("#today-progress"), /0 of 3 bins done/);
    assert.match(await page.textContent("#who"), new RegExp(COUNTER.display));
    await controlled(page);

    let reached = 0;
    page.on("request", (r) => { if (!r.url().startsWith("data:")) reached += 1; });
    await browser.context.setOffline(true);
    // Requests the worker answers from its cache still show up here; count those that fail.
    const failed = [];
    page.on("requestfailed", (r) => failed.push(r.url()));
    await page.reload();
    await page.waitForSelector("#today:not([hidden]) .task");
    assert.equal(await page.textContent("#net"), "Offline");
    assert.deepEqual(await page.$$eval("#today-list .task", (els) => els.map((e) => e.dataset.bin)),
      ["A-01-01-1", "A-01-02-1", "A-01-03-1"]);
    assert.ok(reached > 0, "the reload loaded the shell");
    assert.deepEqual(failed.filter((u) => !u.includes("/api/")), [], "every shell file came from the cache");

    // A second page in the same offline browser starts too (no sign-in, no caution again).
    const again = await browser.context.newPage();
    await again.goto(`${server.url}/app/`);
    await again.waitForSelector("#today:not([hidden]) .task");
  } finally {
    await browser.close();
  }
});

test("a wrong PIN is refused with the server's message and no device is stored", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await page.goto(`${server.url}/app/`);
    await page.waitForSelector("#signin:not([hidden])");
    await page.fill("input[name=user]", COUNTER.user);
    await page.fill("input[name=pin]", "0000");
    await page.fill("input[name=site]", "T");
    await page.click("#signin-form button");
    await page.waitForFunction(() => document.getElementById("signin-error").textContent !== "");
    assert.match(await page.textContent("#signin-error"), /name or PIN/i);
    await page.reload();
    await page.waitForSelector("#signin:not([hidden])");
  } finally {
    await browser.close();
  }
});

test("a list from another day, or older than the server's, is flagged stale", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    await controlled(page);
    assert.equal(await page.isHidden("#stale"), true, "a fresh list is not stale");
    const list = await page.evaluate(async () => (await import("/app/js/db.js")).get("list"));

    // The supervisor changes the list while a bin is open: the phone learns of it on a
    // refresh, keeps the bin's list and says so.
    await openBin(page, "A-01-01-1", list.tasks[0].label);
    await server.api("PUT", `/api/v1/sites/T/count-lists/${list.day}/runs/1`, { holder: COUNTER.user });
    const changed = await server.api("GET", `/api/v1/sites/T/count-lists/${list.day}`);
    assert.ok(changed.version > list.version, "the change raised the list's version");
    // Coming back online makes the phone check its list.
    await browser.context.setOffline(true);
    await browser.context.setOffline(false);
    await page.waitForSelector("#stale:not([hidden])");
    assert.match(await page.textContent("#stale"),
      new RegExp(`changed on the server \\(version ${changed.version}, this phone holds ${list.version}\\)`));
    assert.match(await page.textContent("#bin-title"), /^Counting A-01-01-1/, "the open bin stays");
    await scan(page, ITEMS[0].each);
    await page.waitForFunction(() => document.querySelectorAll("#lines li").length === 1);
    await page.click("#bin-done");
    await page.waitForSelector("#today:not([hidden])");
    assert.equal(await page.isHidden("#stale"), true, "the newer list is loaded once the bin is done");
    const held = await page.evaluate(async () => (await import("/app/js/db.js")).get("list"));
    assert.equal(held.version, changed.version);

    // A list kept from yesterday, opened offline.
    await page.evaluate(async () => {
      const db = await import("/app/js/db.js");
      const l = await db.get("list");
      await db.set("list", { ...l, day: "2020-01-01", fetched_at: Date.now() - 30 * 3600_000 });
      await db.del("open");
    });
    await browser.context.setOffline(true);
    await page.reload();
    await page.waitForSelector("#today:not([hidden])");
    await page.waitForSelector("#stale:not([hidden])");
    assert.match(await page.textContent("#stale"), /for 2020-01-01, not today/);
  } finally {
    await browser.close();
  }
});
