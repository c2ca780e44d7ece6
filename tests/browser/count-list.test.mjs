// The supervisor's count-list page in Chromium: at tablet width the page fits the screen, its
// progress figures follow the server without a reload, and the day's labels print on A4 pages.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { writeFileSync } from "node:fs";
import { join } from "node:path";
import { startServer, launch, cairn } from "./harness.mjs";

/** Test-only password. */
const PASSWORD = "test-only-password";
const DAY = "2026-03-03";
/** Four bins whose book went below zero, so all four are triggered counts. */
const BINS = [1, 2, 3, 4];

let server, browser, token;

before(async () => {
  server = await startServer({
    // Plain HTTP on loopback: a Secure cookie would not come back.
    env: { CAIRN_SECURE_COOKIES: "false" },
    prepare(db, dir) {
      const file = (name, text) => {
        const path = join(dir, name);
        writeFileSync(path, text);
        return path;
      };
      const bins = file("bins.csv", "zone,aisle,bay,level,side\n" + BINS.map((b) => `A,1,${b},1,L\n`).join(""));
      const items = file("items.csv", "sku,description,base_unit,unit_cost_minor,lot_tracked,group\nS1,Hex bolt M8,box,450,false,\n");
      let moves = "id,bin,sku,lot,expiry,qty,kind,event_at,source,doc_ref,actor,reverses\n";
      for (const b of BINS) {
        moves += `r${b},A-01-0${b}-1,S1,,,10,receipt,2026-03-02T08:00:00Z,,,,\n`;
        moves += `p${b},A-01-0${b}-1,S1,,,-12,pick,2026-03-02T09:00:00Z,,,,\n`;
      }
      const movements = file("movements.csv", moves);
      for (const [kind, path] of [["bins", bins], ["items", items], ["movements", movements]]) {
        cairn(["import", kind, "--db", db, "--site", "T", path]);
      }
      cairn(["user", "add", "--db", db, "--site", "T", "--name", "sam", "--roles", "supervisor", "--password-stdin"], `${PASSWORD}\n`);
      token = cairn(["user", "token", "--db", db, "--site", "T", "--name", "sam", "--role", "supervisor"]).trim();
      cairn(["plan", "--db", db, "--site", "T", "--date", DAY, "--counters", "2", "--minutes", "60", "--save"]);
    },
  });
  browser = await launch();
});

after(async () => {
  await browser?.close();
  await server?.stop();
});

async function api(path, init = {}) {
  const r = await fetch(`${server.url}${path}`, {
    ...init,
    headers: { authorization: `Bearer ${token}`, "content-type": "application/json", ...init.headers },
  });
  return { status: r.status, body: await r.json() };
}

/** Opens a page of the browser, whose context signs in as sam once. */
let signedIn = false;
async function signedInPage(width, height) {
  const page = await browser.context.newPage();
  await page.setViewportSize({ width, height });
  if (!signedIn) {
    await page.goto(`${server.url}/sign-in`);
    await page.fill("input[name=user]", "sam");
    await page.fill("input[name=password]", PASSWORD);
    // A supervisor starts on today's count list.
    await Promise.all([page.waitForURL(/\/sites\/T\/count-lists\/\d{4}-\d{2}-\d{2}$/), page.click("button[type=submit]")]);
    signedIn = true;
  }
  return page;
}

const clock = (s) => `${Math.floor(s / 60)}:${String(s % 60).padStart(2, "0")}`;

test("at tablet width the day's list fits and its progress follows the server without a reload", async () => {
  const page = await signedInPage(768, 1024);
  await page.goto(`${server.url}/sites/T/count-lists/${DAY}`);
  // The page never scrolls sideways; a wide table scrolls inside its own box.
  const overflow = await page.evaluate(() => document.documentElement.scrollWidth - document.documentElement.clientWidth);
  assert.ok(overflow <= 0, `the page is ${overflow}px wider than a 768px screen`);
  for (const selector of ["#progress", "#run-1", "#run-2", "form[action$='/runs/1/holder']"]) {
    assert.ok(await page.isVisible(selector), `${selector} is shown`);
  }
  await page.evaluate(() => {
    window.sameDocument = true;
  });

  // Another screen moves run 1's first task to run 2.
  const { body: list } = await api(`/api/v1/sites/T/count-lists/${DAY}`);
  const task = list.tasks.find((t) => t.run === 1);
  assert.ok(task, "run 1 has a task");
  const cell = '[data-run="1"][data-part="not_started"]';
  const shown = await page.textContent(cell);
  const moved = await api(`/api/v1/sites/T/count-lists/${DAY}/tasks/${task.id}/move`, {
    method: "POST",
    body: JSON.stringify({ run: 2 }),
  });
  assert.equal(moved.status, 200);

  // Within one refresh (every 10 s) the figures change in place.
  await page.waitForFunction(([sel, before]) => document.querySelector(sel).textContent !== before, [cell, shown], {
    timeout: 30_000,
  });
  const { body: progress } = await api(`/api/v1/sites/T/count-lists/${DAY}/progress`);
  for (const r of progress.runs) {
    const t = r.not_started;
    assert.equal(await page.textContent(`[data-run="${r.run}"][data-part="not_started"]`), `${t.tasks} · ${clock(t.est_s)}`);
  }
  assert.match(await page.textContent("#live-note"), /reload it/);
  assert.equal(await page.evaluate(() => window.sameDocument), true, "the page was not reloaded");
  await page.close();
});

test("the day's labels print one A4 page per run", async () => {
  const page = await signedInPage(1280, 900);
  await page.goto(`${server.url}/sites/T/count-lists/${DAY}/labels`);
  const sheets = await page.locator("section.sheet svg").count();
  assert.equal(sheets, 2, "two runs with tasks");
  assert.ok(await page.isVisible("button[data-print]"), "the script shows the print button");
  const pdf = (await page.pdf({ preferCSSPageSize: true })).toString("latin1");
  const pages = pdf.match(/\/Type\s*\/Page\b(?!s)/g) ?? [];
  assert.equal(pages.length, sheets, "each run's sheet is one page, with nothing spilling over");
  // A4 is 210 x 297 mm (ISO 216), 595.3 x 841.9 points.
  const box = pdf.match(/\/MediaBox\s*\[\s*0\s+0\s+([\d.]+)\s+([\d.]+)\s*\]/);
  assert.ok(box, "the PDF names its page size");
  assert.ok(Math.abs(Number(box[1]) - 595.3) < 1.5 && Math.abs(Number(box[2]) - 841.9) < 1.5, box[0]);
  await page.close();
});
