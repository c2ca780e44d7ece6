// The scan rules and the camera decoder, compiled to WebAssembly, running in Chromium.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { readFileSync } from "node:fs";
import { join } from "node:path";
import { startServer, launch, ROOT } from "./harness.mjs";

let server, browser, page;

before(async () => {
  server = await startServer();
  browser = await launch();
  page = await browser.context.newPage();
  await page.goto(`${server.url}/app/label-check.html`);
  await page.waitForFunction(() => document.getElementById("out").textContent === "Ready.");
});

after(async () => {
  await browser?.close();
  await server?.stop();
});

test("the label-check page parses a GS1 element string with the wasm rules", async () => {
  // GS1 example GTIN 09501101020917 (from memory; check digit 7 by the GS1 mod-10 rule).
  await page.fill("#code", "]C101095011010209171719050810ABCD1234\\x1d2110");
  await page.click("button");
  const out = JSON.parse(await page.textContent("#out"));
  assert.equal(out.scan.gtin, "09501101020917");
  assert.equal(out.scan.expiry, "2019-05-08");
  assert.deepEqual(out.elements.map((e) => e.ai), ["01", "17", "10", "21"]);
});

test("a wrong check digit shows the parser's message", async () => {
  await page.fill("#code", "(01)09501101020918");
  await page.click("button");
  assert.equal(await page.getAttribute("#out", "data-state"), "error");
  assert.match(await page.textContent("#out"), /check digit should be 7, found 8/);
});

// Images made by independent encoders (python-barcode, segno, pylibdmtx; see the manifest).
const images = JSON.parse(readFileSync(join(ROOT, "client/scan/tests/fixtures/images/manifest.json"), "utf8"));
const list = Object.entries(images).find(([k]) => k.startsWith("images"))[1];

test("the camera decoder reads every fixture format in the browser without crashing", async () => {
  for (const img of list.filter((i) => !i.file.includes("degraded"))) {
    const png = readFileSync(join(ROOT, "client/scan/tests/fixtures/images", img.file)).toString("base64");
    const got = await page.evaluate(async (base64) => {
      const mod = await import("/app/pkg/cairn_camera.js");
      await mod.default();
      // From bytes, not a data: URL, which the app's content security policy refuses.
      const bytes = Uint8Array.from(atob(base64), (ch) => ch.charCodeAt(0));
      const im = await createImageBitmap(new Blob([bytes], { type: "image/png" }));
      const c = document.createElement("canvas");
      c.width = im.width;
      c.height = im.height;
      const g = c.getContext("2d");
      g.drawImage(im, 0, 0);
      const px = g.getImageData(0, 0, c.width, c.height);
      return mod.decodeFrame(new Uint8Array(px.data.buffer), c.width, c.height);
    }, png);
    assert.ok(got, `${img.file} decodes`);
    const plain = (t) => t.replace(/^\][A-Za-z][0-9A-Za-z]/, "").replace(/[()\x1d]/g, "");
    assert.equal(plain(got.text), plain(img.text), `${img.file} (${got.format})`);
  }
});
