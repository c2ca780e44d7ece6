// Counting a bin on the phone: the label check, each and case scans, GS1 lot and expiry,
// AIM prefixes, found stock, refusals that record nothing, undo, the keypad, and the close.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { join } from "node:path";
import { startServer, seedSite, ITEMS, gtin, ROOT } from "./harness.mjs";
import { launchPhone, signIn, scan, message, journal, openBin, lines } from "./phone.mjs";

let server, tasks;
const [bolt, washer] = ITEMS;

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

const label = (bin) => tasks.find((t) => t.bin === bin).label;

test("scans add each and case units, keep GS1 lot and expiry, and undo takes back the last line", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    await openBin(page, "A-01-01-1", label("A-01-01-1"));
    await scan(page, bolt.each);
    await lines(page, 1);
    // An AIM prefix (]E0: EAN-13) and a Tab ending, as some scanners send.
    await page.keyboard.type(`]E0${bolt.each.slice(1)}`, { delay: 4 });
    await page.keyboard.press("Tab");
    await lines(page, 2);
    // GS1-128 with AI 10 (variable length, so GS follows it, sent as Ctrl+]) and AI 17
    // (GS1 General Specifications §3.2: AI 10 lot, AI 17 expiry YYMMDD).
    await page.keyboard.type(`]C101${bolt.case}10B7`, { delay: 4 });
    await page.keyboard.press("Control+BracketRight");
    await page.keyboard.type("17271231", { delay: 4 });
    await page.keyboard.press("Enter");
    await lines(page, 3);
    assert.equal(await page.textContent(`#bin-items li[data-sku="${bolt.sku}"] .counted`), `${1 + 1 + bolt.units} each`);

    // The journal keeps every event the phone recorded, sent or not (the page syncs meanwhile).
    let events = (await journal(page)).map(({ status: _s, flags: _f, ...e }) => e);
    assert.deepEqual(events.map((e) => e.type), ["bin_opened", "line", "line", "line"]);
    const opened = events[0];
    assert.equal(opened.label, label("A-01-01-1"));
    assert.ok(events.every((e) => e.count === opened.id && e.bin === "A-01-01-1" && e.task === opened.task));
    const [, each, aim, kase] = events;
    assert.deepEqual([each.gtin, each.packs, each.qty, each.lot, each.expiry, each.entry],
      [bolt.each, 1, 1, "", null, "scan"]);
    assert.equal(aim.gtin, bolt.each, "the ]E0 prefix is read, not kept in the GTIN");
    assert.deepEqual([kase.gtin, kase.qty, kase.lot, kase.expiry], [bolt.case, bolt.units, "B7", "2027-12-31"]);
    // UUIDv7 layout (RFC 9562 §5.7): version nibble 7, variant bits 10, ids rising with time.
    for (const e of events) {
      assert.match(e.id, /^[0-9a-f]{8}-[0-9a-f]{4}-7[0-9a-f]{3}-[89ab][0-9a-f]{3}-[0-9a-f]{12}$/);
      assert.ok(Math.abs(parseInt(e.id.replaceAll("-", "").slice(0, 12), 16) - e.at) <= 1);
    }
    assert.deepEqual(events.map((e) => e.id), events.map((e) => e.id).sort());

    await page.click("#undo");
    await lines(page, 2);
    events = await journal(page);
    assert.deepEqual(events.at(-1).type, "undo");
    assert.equal(events.at(-1).line, kase.id);
    assert.equal(await page.textContent(`#bin-items li[data-sku="${bolt.sku}"] .counted`), "2 each");

    // The keypad: 25 base units of an item chosen by SKU (gtin null, entry keypad).
    await page.click("#keypad-open");
    await page.selectOption("#keypad-target", { label: `${bolt.sku} · each` });
    for (const k of ["2", "5"]) await page.click(`#keypad [data-key="${k}"]`);
    await page.click("#keypad-add");
    await lines(page, 3);
    const keyed = (await journal(page)).at(-1);
    assert.deepEqual([keyed.sku, keyed.gtin, keyed.packs, keyed.qty, keyed.entry], [bolt.sku, null, 25, 25, "keypad"]);

    // Bin done returns to the list with the bin ticked; the next bin is found by its label alone.
    await page.click("#bin-done");
    await page.waitForSelector("#today:not([hidden])");
    assert.match(await page.textContent("#today-progress"), /1 of 3 bins done/);
    await scan(page, label("A-01-02-1"));
    await page.waitForFunction(() => document.getElementById("bin-title").textContent === "Counting A-01-02-1");
    await page.click("#bin-empty");
    await page.waitForSelector("#today:not([hidden])");
    assert.match(await page.textContent("#today-progress"), /2 of 3 bins done/);
    assert.deepEqual((await journal(page)).slice(-4).map((e) => e.type), ["bin_done", "bin_opened", "bin_empty", "bin_done"]);
  } finally {
    await browser.close();
  }
});

test("a wrong bin, a bad check digit and an unknown GTIN each show their message and record nothing", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    await page.click('#today-list .task[data-bin="A-01-01-1"] button');
    await page.waitForSelector("#bin:not([hidden])");
    await scan(page, label("A-01-02-1"));
    assert.equal(await message(page, /^Wrong bin/), "error");
    assert.equal(await page.getAttribute("body", "data-feedback"), "error");
    assert.equal((await journal(page)).length, 0, "a wrong bin records nothing");
    assert.match(await page.textContent("#bin-title"), /^Go to A-01-01-1/);

    await scan(page, label("A-01-01-1"));
    await page.waitForFunction(() => document.getElementById("bin-title").textContent === "Counting A-01-01-1");
    assert.equal((await journal(page)).length, 1);
    // Another bin's label while counting is refused as well.
    await scan(page, label("A-01-03-1"));
    assert.equal(await message(page, /^Wrong bin: this label is CB1-T-A-01-03-1/), "error");
    // The check digit of 0501234500010 is 7 (GS1 mod 10); 8 is wrong.
    const bad = `${bolt.each.slice(0, -1)}${(Number(bolt.each.at(-1)) + 1) % 10}`;
    await scan(page, bad);
    assert.equal(await message(page, /check digit should be 7, found 8.*Nothing recorded/), "error");
    // A valid GTIN (GS1 example 4006381333931, from memory) that no item of the site has.
    await scan(page, gtin("400638133393"));
    assert.equal(await message(page, /^Unknown GTIN 04006381333931.*Nothing recorded/), "error");
    await scan(page, "hello-world");
    assert.equal(await message(page, /Nothing recorded/), "error");
    assert.equal((await journal(page)).length, 1, "none of the refusals recorded anything");
    assert.equal(await page.$$eval("#lines li", (l) => l.length), 0);

    // An item of the catalogue the bin was not expected to hold is found stock, recorded.
    await scan(page, washer.each);
    assert.equal(await message(page, /^Found stock: KL-1002/), "warn");
    const events = await journal(page);
    assert.equal(events.length, 2);
    assert.equal(events[1].sku, washer.sku);
    assert.ok(await page.$(`#bin-items li.found[data-sku="${washer.sku}"]`));
    // Once sent, the server agrees: the line is flagged found stock.
    await page.waitForFunction(() => document.getElementById("waiting").textContent === "0 waiting"
      && document.body.dataset.syncing !== "yes");
    const sent = (await journal(page)).find((e) => e.id === events[1].id);
    assert.deepEqual([sent.status, sent.flags], ["accepted", ["found_stock"]]);
  } finally {
    await browser.close();
  }
});

test("the camera reads a GS1-128 code through the wasm decoder into a recorded line", async () => {
  const video = join(ROOT, "tests/browser/fixtures/camera-gs1-128.mjpeg");
  const browser = await launchPhone([
    "--use-fake-device-for-media-stream", "--use-fake-ui-for-media-stream",
    `--use-file-for-fake-video-capture=${video}`,
  ]);
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    assert.equal(await page.evaluate(() => "BarcodeDetector" in globalThis), false,
      "Linux Chromium has no BarcodeDetector, so the wasm path is the one tested");
    await openBin(page, "A-01-01-1", label("A-01-01-1"));
    const decoderRequests = [];
    page.on("request", (r) => { if (r.url().includes("cairn_camera")) decoderRequests.push(r.url()); });
    await page.click("#camera-toggle");
    await lines(page, 1);
    assert.equal(await page.getAttribute("#camera", "data-decoder"), "wasm");
    assert.ok(decoderRequests.some((u) => u.endsWith(".wasm")), "the decoder loads when the camera opens");
    await page.click("#camera-toggle");
    const line = (await journal(page)).find((e) => e.type === "line");
    // The fixture encodes (01)15012345000173(17)271231(10)B7 (fixtures/make-camera-fixture.mjs).
    assert.deepEqual([line.gtin, line.qty, line.lot, line.expiry, line.entry],
      [bolt.case, bolt.units, "B7", "2027-12-31", "camera"]);
  } finally {
    await browser.close();
  }
});
