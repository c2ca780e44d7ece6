// Blind counts seen from the phone (no response the app receives carries a book quantity)
// and the screenshots of the main screens at 360×740. Screenshots go to docs/phone-*.png
// when CAIRN_SCREENSHOTS=1 (to refresh the README's pictures), else to a temporary folder.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { startServer, seedSite, ITEMS, ROOT, COUNTER } from "./harness.mjs";
import { launchPhone, scan, openBin, lines, controlled } from "./phone.mjs";

let server;
const keep = process.env.CAIRN_SCREENSHOTS === "1";
const shots = keep ? join(ROOT, "docs") : mkdtempSync(join(tmpdir(), "cairn-shots-"));

before(async () => {
  server = await startServer({ site: true });
  await seedSite(server);
});

after(async () => {
  await server?.stop();
  if (!keep) rmSync(shots, { recursive: true, force: true });
});

/** Names every key anywhere in a JSON value that could carry a book figure. */
function bookKeys(value, path = "$", out = []) {
  if (Array.isArray(value)) value.forEach((v, i) => bookKeys(v, `${path}[${i}]`, out));
  else if (value && typeof value === "object") {
    for (const [k, v] of Object.entries(value)) {
      if (/qty|quantity|balance|on_?hand|book|stock|expected_units/i.test(k)) out.push(`${path}.${k}`);
      bookKeys(v, `${path}.${k}`, out);
    }
  }
  return out;
}

/** Checks a screenshot is a PNG of the phone's width (IHDR width at byte 16). */
function checkShot(file) {
  const png = readFileSync(file);
  assert.equal(png.subarray(1, 4).toString(), "PNG");
  assert.equal(png.readUInt32BE(16), 360, `${file} is 360 px wide`);
}

test("the phone never receives a book quantity, and the main screens fit 360 px", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    const inspected = [];
    const pending = [];
    page.on("response", (r) => {
      const type = r.headers()["content-type"] ?? "";
      if (!type.includes("json")) return;
      pending.push(r.text().then((t) => {
        inspected.push(new URL(r.url()).pathname);
        const found = bookKeys(JSON.parse(t));
        assert.deepEqual(found, [], `${r.url()} carries ${found.join(", ")}`);
      }, () => {}));
    });
    const shot = async (name) => {
      const file = join(shots, `phone-${name}.png`);
      await page.screenshot({ path: file });
      checkShot(file);
    };

    await page.goto(`${server.url}/app/`);
    await page.waitForSelector("#signin:not([hidden])");
    await page.fill("input[name=user]", COUNTER.user);
    await page.fill("input[name=pin]", COUNTER.pin);
    await page.fill("input[name=site]", "T");
    await page.fill("input[name=device_name]", "phone 3");
    await shot("sign-in");
    await page.click("#signin-form button");
    await page.waitForSelector("#caution:not([hidden])");
    await shot("caution");
    await page.click("#caution-ok");
    await page.waitForSelector("#today:not([hidden]) .task");
    await controlled(page);
    await shot("today");

    const tasks = await page.evaluate(async () => {
      const r = indexedDB.open("cairn-phone");
      await new Promise((ok) => { r.onsuccess = ok; });
      const g = r.result.transaction("kv").objectStore("kv").get("list");
      await new Promise((ok) => { g.onsuccess = ok; });
      return g.result.tasks;
    });
    await openBin(page, "A-01-01-1", tasks[0].label);
    await scan(page, ITEMS[0].each);
    await scan(page, ITEMS[0].case);
    await scan(page, ITEMS[1].each);
    await lines(page, 3);
    await shot("counting");
    // The targets a counter taps are at least 48 px high.
    const small = await page.$$eval("#bin button:not([hidden]), #status", (els) =>
      els.filter((e) => e.offsetParent && e.getBoundingClientRect().height < 48).map((e) => e.id || e.textContent));
    assert.deepEqual(small, []);
    const wide = await page.evaluate(() => document.documentElement.scrollWidth);
    assert.ok(wide <= 360, `nothing sticks out sideways (${wide} px)`);

    await page.click("#bin-done");
    await page.waitForSelector("#today:not([hidden])");
    await page.click("#status");
    await page.waitForSelector("#sync:not([hidden])");
    await page.click("#sync-now");
    await page.waitForFunction(() => document.getElementById("waiting").textContent === "0 waiting"
      && document.body.dataset.syncing !== "yes" && /ms/.test(document.getElementById("sync-clock").textContent));
    await shot("sync");
    await page.click("#refresh").catch(() => {});
    await Promise.all(pending);
    assert.ok(inspected.some((p) => p.endsWith("/my-tasks")), `my-tasks was inspected (${inspected})`);
    assert.ok(inspected.includes("/api/v1/devices"));
  } finally {
    await browser.close();
  }
});
