// The app shell: sign-in once online, the caution screen, today's list, and a start with
// no connection at all (served by the service worker from its cache).
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { startServer, seedSite, launch, COUNTER } from "./harness.mjs";
import { signIn, controlled } from "./phone.mjs";

let server;

before(async () => {
  server = await startServer({ site: true });
  await seedSite(server);
});

after(() => server?.stop());

test("after one sign-in online, the app starts offline with today's list in walking order", async () => {
  const browser = await launch();
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
  const browser = await launch();
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
