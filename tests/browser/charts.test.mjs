// The accuracy page's charts in Chromium at a phone's, a tablet's and a desktop's width:
// each chart shows one drawing that fits, and no two of its text labels overlap on
// screen (their boxes as the browser laid them out). The counts come from a phone's
// sync over HTTP, as a counter's would.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { startServer, seedSite, launch, cairn, ITEMS, COUNTER } from "./harness.mjs";
import { uuid7 } from "../../client/web/js/uuid7.js";

/** Test-only password of the inventory manager who reads the page. */
const PASSWORD = "test-only-password-ines";
const WIDTHS = [360, 768, 1366];

let server, browser;

before(async () => {
  server = await startServer({
    site: true,
    // Plain HTTP on loopback: a Secure cookie would not come back.
    env: { CAIRN_SECURE_COOKIES: "false" },
    prepare(db) {
      cairn(["user", "add", "--db", db, "--site", "T", "--name", "ines",
        "--roles", "inventory_manager", "--password-stdin"], `${PASSWORD}\n`);
    },
  });
  await seedSite(server);
  await countEveryBin();
  browser = await launch();
});

after(async () => {
  await browser?.close();
  await server?.stop();
});

/** The counter's phone counts each bin of today's list: right, except one short by 3. */
async function countEveryBin() {
  const enrolled = await (await fetch(`${server.url}/api/v1/devices`, {
    method: "POST", headers: { "content-type": "application/json" },
    body: JSON.stringify({ user: COUNTER.user, pin: COUNTER.pin, site: "T", device_name: "charts" }),
  })).json();
  const auth = { authorization: `Bearer ${enrolled.token}`, "content-type": "application/json" };
  const { tasks } = await (await fetch(`${server.url}/api/v1/sites/T/my-tasks`, { headers: auth })).json();
  assert.ok(tasks.length >= 3, `today's list has the stocked bins (${tasks.length} tasks)`);
  const events = [];
  let at = Date.now() - 60_000;
  for (const [n, task] of tasks.entries()) {
    const count = uuid7(at);
    const base = { user: COUNTER.user, count, task: task.id, bin: task.bin };
    events.push({ ...base, id: count, at, type: "bin_opened", label: task.label });
    const stocked = ITEMS.findIndex((i) => i.bin === task.bin);
    if (stocked >= 0) {
      const item = ITEMS[stocked];
      // The seed put 40 + index on each stocked bin; the first bin counted is 3 short.
      const qty = 40 + stocked - (n === 0 ? 3 : 0);
      events.push({ ...base, id: uuid7(at + 5), at: at + 5, type: "line", sku: item.sku,
        gtin: item.each, packs: qty, qty, lot: "", expiry: null, entry: "scan" });
    }
    events.push({ ...base, id: uuid7(at + 10), at: at + 10, type: "bin_done" });
    at += 1_000;
  }
  const answer = await (await fetch(`${server.url}/api/v1/sites/T/sync`, {
    method: "POST", headers: auth,
    body: JSON.stringify({ device_clock: Date.now(), rtt_ms: 50, events }),
  })).json();
  for (const r of answer.results) assert.equal(r.status, "accepted", JSON.stringify(r));
}

let signedIn = false;
async function page(width) {
  const p = await browser.context.newPage();
  await p.setViewportSize({ width, height: 900 });
  if (!signedIn) {
    await p.goto(`${server.url}/sign-in`);
    await p.fill("input[name=user]", "ines");
    await p.fill("input[name=password]", PASSWORD);
    await Promise.all([p.waitForNavigation(), p.click("button[type=submit]")]);
    signedIn = true;
  }
  return p;
}

/** Every shown chart: its id, its labels' text and on-screen boxes, and its width. */
function shownCharts(p) {
  return p.$$eval("figure svg.chart", (svgs) => svgs
    .filter((s) => s.getBoundingClientRect().width > 0)
    .map((s) => ({
      id: s.id,
      width: s.getBoundingClientRect().width,
      labels: [...s.querySelectorAll("text")].map((t) => {
        const r = t.getBoundingClientRect();
        return { text: t.textContent, x0: r.left, y0: r.top, x1: r.right, y1: r.bottom };
      }),
    })));
}

for (const width of WIDTHS) {
  test(`at ${width} px each accuracy chart shows once and no two of its labels overlap`, async () => {
    const p = await page(width);
    try {
      await p.goto(`${server.url}/sites/T/accuracy`);
      const overflow = await p.evaluate(() => document.documentElement.scrollWidth - document.documentElement.clientWidth);
      assert.ok(overflow <= 0, `the page is ${overflow}px wider than the screen`);
      const charts = await shownCharts(p);
      const frame = width <= 600 ? "narrow" : "wide";
      assert.deepEqual(charts.map((c) => c.id),
        ["chart-ira", "chart-adj", "chart-comp"].map((id) => `${id}-${frame}`));
      const ira = charts[0].labels.map((l) => l.text);
      assert.ok(ira.some((t) => /^target \d+ %$/.test(t)), `the IRA chart has its target: ${ira}`);
      assert.ok(ira.some((t) => /^\d{4}-W\d{2}$/.test(t)), `and week labels: ${ira}`);
      assert.ok(!ira.includes("No counts in this period"), "the counts are drawn");
      for (const chart of charts) {
        assert.ok(chart.width <= width, `${chart.id} fits the screen`);
        const { labels } = chart;
        assert.ok(labels.length >= 4, `${chart.id} has labels: ${labels.map((l) => l.text)}`);
        for (const l of labels) {
          // Readable: no label is drawn smaller than 9 px tall.
          assert.ok(l.y1 - l.y0 >= 9, `${chart.id} "${l.text}" is ${l.y1 - l.y0}px tall`);
        }
        for (let i = 0; i < labels.length; i++) {
          for (let j = i + 1; j < labels.length; j++) {
            const [a, b] = [labels[i], labels[j]];
            const overlap = a.x0 < b.x1 && b.x0 < a.x1 && a.y0 < b.y1 && b.y0 < a.y1;
            assert.ok(!overlap, `${chart.id} at ${width}px: "${a.text}" ${JSON.stringify(a)} overlaps "${b.text}" ${JSON.stringify(b)}`);
          }
        }
        // The value axis prints each value once.
        const ticks = await p.$$eval(`#${chart.id} text.tick`, (ts) => ts.map((t) => t.textContent));
        assert.ok(ticks.length >= 2, `${chart.id} ticks: ${ticks}`);
        assert.equal(new Set(ticks).size, ticks.length, `${chart.id} ticks: ${ticks}`);
      }
    } finally {
      await p.close();
    }
  });
}

test("a period without counts says so in words instead of drawing empty lines", async () => {
  for (const width of [360, 1366]) {
    const p = await page(width);
    try {
      await p.goto(`${server.url}/sites/T/accuracy?since=2025-01-05&until=2025-02-01`);
      const charts = await shownCharts(p);
      assert.equal(charts.length, 3);
      for (const chart of charts.slice(0, 2)) {
        assert.deepEqual(chart.labels.map((l) => l.text), ["No counts in this period"], chart.id);
      }
      assert.deepEqual(charts[2].labels.map((l) => l.text), ["No planned tasks in this period"]);
      assert.equal(await p.locator("figure svg.chart:visible path").count(), 0, "no lines drawn");
    } finally {
      await p.close();
    }
  }
});
