// Each demo person signs in on a small demo site with counting history (`cairn demo
// --small`) and lands on their start page, which shows what the simulated weeks left
// behind: differences waiting for the inventory manager, counted keys on the accuracy
// page, safety stocks for the planner, today's tasks for the supervisor, the phone's
// instructions for a counter, the people for the admin. Each page is shot at 1366 and
// 390 px wide; the shots go to docs/start-*.png when CAIRN_SCREENSHOTS=1 (to refresh
// the README's pictures), else to a temporary folder.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { mkdtempSync, readFileSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { startDemo, launch, ROOT } from "./harness.mjs";

const keep = process.env.CAIRN_SCREENSHOTS === "1";
const shots = keep ? join(ROOT, "docs") : mkdtempSync(join(tmpdir(), "cairn-shots-"));
/** Widths shot, each with a screen height of its kind of device. */
const SCREENS = [
  { width: 1366, height: 800 },
  { width: 390, height: 844 },
];

let demo, browser;

before(async () => {
  demo = await startDemo();
  browser = await launch();
});

after(async () => {
  await browser?.close();
  await demo?.stop();
  if (!keep) rmSync(shots, { recursive: true, force: true });
});

/** Signs `user` in with the demo's published password; returns the page where it landed. */
async function signIn(user, password) {
  await browser.context.clearCookies();
  const page = await browser.context.newPage();
  await page.setViewportSize(SCREENS[0]);
  await page.goto(`${demo.url}/sign-in`);
  await page.fill("input[name=user]", user);
  await page.fill("input[name=password]", password);
  await Promise.all([page.waitForNavigation(), page.click("button[type=submit]")]);
  return page;
}

/** Shoots the page at each width as docs/start-NAME-WIDTH.png (or the temporary folder). */
async function shoot(page, name) {
  for (const screen of SCREENS) {
    await page.setViewportSize(screen);
    const file = join(shots, `start-${name}-${screen.width}.png`);
    await page.screenshot({ path: file });
    const png = readFileSync(file);
    assert.equal(png.subarray(1, 4).toString(), "PNG");
    assert.equal(png.readUInt32BE(16), screen.width, `${file} is ${screen.width} px wide`);
    // The page fits its width: nothing but a table's own scroll box runs wider.
    const wider = await page.evaluate(() => document.documentElement.scrollWidth - window.innerWidth);
    assert.ok(wider <= 0, `${name} at ${screen.width} px runs ${wider} px wider than the screen`);
  }
}

const PEOPLE = [
  {
    name: "inventory-manager", user: "chiara", password: "demo-only-chiara-manager", start: /^\/sites\/KLN\/differences$/,
    async check(page) {
      const waiting = await page.locator("tr[data-difference]").count();
      assert.ok(waiting >= 1, `${waiting} differences wait for review`);
    },
  },
  {
    name: "planner", user: "dmitri", password: "demo-only-dmitri-planner", start: /^\/sites\/KLN\/buffer$/,
    async check(page) {
      // The SS column: its header says so, then the figure in the same column of each row.
      const headers = await page.locator("table.grid thead th").allInnerTexts();
      const ss = headers.findIndex((h) => h.trim().startsWith("SS"));
      assert.ok(ss >= 0, `an SS column among ${headers.join(" | ")}`);
      const figures = await page.locator(`table.grid tbody tr td:nth-child(${ss + 1})`).allInnerTexts();
      const positive = figures.filter((f) => Number.parseFloat(f) > 0).length;
      assert.ok(positive >= 1, `buffer rows with a safety stock: ${positive} of ${figures.length}`);
      assert.match(await page.locator("#rows-shown").innerText(), /^rows 1–\d+ of 60/);
    },
  },
  {
    // Today's list: the list page of today's date.
    name: "supervisor", user: "bruno", password: "demo-only-bruno-supervisor", start: /^\/sites\/KLN\/count-lists\/\d{4}-\d{2}-\d{2}$/,
    async check(page) {
      const tasks = await page.locator("table.tasks tbody tr").count();
      assert.ok(tasks >= 1, `today's list has ${tasks} tasks`);
    },
  },
  {
    name: "counter", user: "esme", password: "demo-only-esme-counter", start: /^\/sites\/KLN\/phone$/,
    async check(page) {
      assert.match(await page.locator("h1").innerText(), /Counting on a phone/);
      assert.equal(await page.locator('a[href="/app/"]').count(), 1, "a link to the phone app");
    },
  },
  {
    name: "admin", user: "ada", password: "demo-only-ada-admin", start: /^\/sites\/KLN\/admin\/users$/,
    async check(page) {
      const people = await page.locator("table.grid tbody tr").count();
      assert.ok(people >= 6, `${people} people listed`);
    },
  },
];

for (const person of PEOPLE) {
  test(`the ${person.name} lands on a start page with the demo's history`, async () => {
    const page = await signIn(person.user, person.password);
    try {
      assert.match(new URL(page.url()).pathname, person.start);
      await person.check(page);
      await shoot(page, person.name);
    } finally {
      await page.close();
    }
  });
}

test("the accuracy page counts the history's keys", async () => {
  const page = await signIn("chiara", "demo-only-chiara-manager");
  try {
    await page.goto(`${demo.url}/sites/KLN/accuracy`);
    const lead = await page.locator("p.lead").first().innerText();
    const counted = Number(/(\d+) counted keys/.exec(lead)?.[1]);
    assert.ok(counted > 0, `counted keys in "${lead}"`);
    await shoot(page, "accuracy");
  } finally {
    await page.close();
  }
});
