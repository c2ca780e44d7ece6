// The outbox on a real Chromium against a real server: scans made offline survive a closed
// page and a killed browser, and reach the server exactly once. The server's side is read
// through its own read of count lines (GET count-lines, as a supervisor's token).
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { execFileSync } from "node:child_process";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { startServer, seedSite, ITEMS } from "./harness.mjs";
import { launchPhone, signIn, controlled, scan, outbox, openBin, lines, outboxCount } from "./phone.mjs";

let server, tasks;
const [bolt] = ITEMS;

before(async () => {
  server = await startServer({ site: true });
  await seedSite(server);
  const token = (await (await fetch(`${server.url}/api/v1/devices`, {
    method: "POST", headers: { "content-type": "application/json" },
    body: JSON.stringify({ user: "esme", pin: "2468", site: "T", device_name: "set-up" }),
  })).json()).token;
  tasks = (await (await fetch(`${server.url}/api/v1/sites/T/my-tasks`, {
    headers: { authorization: `Bearer ${token}` },
  })).json()).tasks;
});

after(() => server?.stop());

/**
 * The count lines the server holds for `bin`, through its support read (GET count-lines,
 * book readers only): {lines, distinct (by event id), qty (sum, undone lines left out)}.
 */
async function serverLines(bin) {
  const all = [];
  for (let after = 0; ;) {
    const page = await server.api("GET", `/api/v1/sites/T/count-lines?after=${after}`);
    all.push(...page.lines);
    if (page.next === null) break;
    after = page.next;
  }
  const mine = all.filter((l) => l.bin === bin);
  return {
    lines: mine.length,
    distinct: new Set(mine.map((l) => l.uid)).size,
    qty: mine.filter((l) => !l.undone).reduce((s, l) => s + l.qty, 0),
  };
}

/** Waits until the page says nothing is waiting (it syncs by itself), then checks its outbox. */
async function drained(page) {
  await page.waitForFunction(() => document.getElementById("waiting").textContent === "0 waiting"
    && document.body.dataset.syncing !== "yes", null, { timeout: 60_000 });
  assert.equal(await outboxCount(page), 0, "the outbox on disk is empty");
}

test("50 scans typed offline survive a closed page and reach the server exactly once", async () => {
  const browser = await launchPhone();
  try {
    let page = await browser.context.newPage();
    await signIn(page, server);
    await controlled(page);
    await browser.context.setOffline(true);
    const task = tasks.find((t) => t.bin === "A-01-01-1");
    await openBin(page, task.bin, task.label);
    for (let i = 0; i < 50; i++) await scan(page, i % 5 === 4 ? bolt.case : bolt.each, 3);
    await lines(page, 50);
    assert.equal((await outbox(page)).filter((e) => e.type === "line").length, 50);
    await page.close();

    page = await browser.context.newPage();
    await page.goto(`${server.url}/app/`);
    await page.waitForSelector("#bin:not([hidden])");
    await lines(page, 50);
    assert.equal((await outbox(page)).filter((e) => e.type === "line").length, 50, "the outbox kept all 50");
    assert.match(await page.textContent("#waiting"), /^51 waiting$/);
    assert.equal((await serverLines(task.bin)).lines, 0, "nothing reached the server while offline");

    await browser.context.setOffline(false);
    await drained(page);
    const got = await serverLines(task.bin);
    assert.deepEqual([got.lines, got.distinct], [50, 50]);
    assert.equal(got.qty, 40 * 1 + 10 * bolt.units, "each and case units add up on the server");
    assert.match(await page.textContent("#waiting"), /^0 waiting$/);
    assert.doesNotMatch(await page.textContent("#last-sync"), /never/);

    // An id sent before with other content is a conflict: out of the outbox, onto the
    // problems list, never resent.
    await page.evaluate(async () => {
      const db = await import("/app/js/db.js");
      const line = (await db.journalAll()).find((e) => e.type === "line");
      const { status: _s, flags: _f, ...event } = line;
      await db.record({ ...event, qty: event.qty + 1 });
    });
    await page.click("#status");
    await page.click("#sync-now");
    await page.waitForSelector("#problems li");
    assert.match(await page.textContent("#problems li"), /^conflict: line A-01-01-1 KL-1001/);
    assert.equal(await outboxCount(page), 0);
    assert.equal((await serverLines(task.bin)).lines, 50, "the conflicting event changed nothing");
  } finally {
    await browser.close();
  }
});

test("a browser killed in the middle of a sync loses no line and doubles none", async () => {
  const dir = mkdtempSync(join(tmpdir(), "cairn-chromium-kept-"));
  const task = tasks.find((t) => t.bin === "A-01-02-1");
  const LINES = 1199; // with the bin_opened event: 1,200 events, three batches of at most 500
  try {
    let browser = await launchPhone([], { userDataDir: dir });
    let page = await browser.context.newPage();
    await signIn(page, server);
    await controlled(page);
    await browser.context.setOffline(true);
    // Queue the events through the app's own outbox module, as the counting screen does.
    await page.evaluate(async ({ task, sku, gtin, n }) => {
      const db = await import("/app/js/db.js");
      const { uuid7 } = await import("/app/js/uuid7.js");
      const count = uuid7();
      await db.record({ id: count, at: Date.now(), count, task: task.id, bin: task.bin, type: "bin_opened", label: task.label });
      for (let i = 0; i < n; i++) {
        await db.record({ id: uuid7(), at: Date.now(), count, task: task.id, bin: task.bin, type: "line",
          sku, gtin, packs: 1, qty: 1, lot: "", expiry: null, entry: "scan" });
      }
    }, { task, sku: "KL-1002", gtin: ITEMS[1].each, n: LINES });
    assert.equal(await outboxCount(page), LINES + 1);

    const pid = chromiumPid(dir);
    const firstAnswer = page.waitForResponse((r) => r.url().endsWith("/sync"), { timeout: 60_000 });
    await browser.context.setOffline(false);
    await firstAnswer;
    process.kill(pid, "SIGKILL");
    await browser.close({ keep: true });
    const atKill = await serverLines(task.bin);
    assert.ok(atKill.lines >= 499 && atKill.lines < LINES, `the kill came mid-sync (${atKill.lines} on the server)`);

    browser = await launchPhone([], { userDataDir: dir, offline: true });
    page = await browser.context.newPage();
    await page.goto(`${server.url}/app/`);
    await page.waitForSelector("#today:not([hidden])");
    const left = await outboxCount(page);
    assert.ok(left > 0, "events the server had not answered before the kill are still waiting");
    assert.ok(atKill.lines + left >= LINES + 1 - 1, `nothing lost: ${atKill.lines} on the server + ${left} waiting`);
    await browser.context.setOffline(false);
    await drained(page);
    const got = await serverLines(task.bin);
    assert.deepEqual([got.lines, got.distinct], [LINES, LINES], "every line once, none doubled");
    await browser.close({ keep: true });
  } finally {
    rmSync(dir, { recursive: true, force: true });
  }
});

/** Finds the Chromium browser process that uses the user-data dir `dir` (a child of this test). */
function chromiumPid(dir) {
  const out = execFileSync("ps", ["-o", "pid=,args=", "--ppid", String(process.pid)], { encoding: "utf8" });
  const row = out.split("\n").find((l) => l.includes(`--user-data-dir=${dir}`));
  assert.ok(row, `a Chromium child of the test uses ${dir}:\n${out}`);
  return Number(row.trim().split(/\s+/)[0]);
}
