// A phone shared between counters: counts waiting on it belong to the person who made them.
// Each event names its maker; when the phone is signed out with counts still waiting, the
// next person cannot sign in until the maker has signed in again and the counts were sent,
// so they are never credited to someone else (the server refuses that too).
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { startServer, seedSite, cairn, ITEMS, COUNTER } from "./harness.mjs";
import { launchPhone, signIn, controlled, scan, outbox, openBin, lines, outboxCount } from "./phone.mjs";

/** A second counter of the site. */
const OTHER = { user: "rosa", pin: "1357" };

let server, tasks;
const [bolt] = ITEMS;

before(async () => {
  server = await startServer({
    site: true,
    prepare: (db) => {
      cairn(["user", "add", "--db", db, "--site", "T", "--name", OTHER.user, "--roles", "counter",
        "--with-pin", "--password-stdin"], `test-only-password-rosa\n${OTHER.pin}\n`);
    },
  });
  await seedSite(server);
  const token = (await (await fetch(`${server.url}/api/v1/devices`, {
    method: "POST", headers: { "content-type": "application/json" },
    body: JSON.stringify({ user: COUNTER.user, pin: COUNTER.pin, site: "T", device_name: "set-up" }),
  })).json()).token;
  tasks = (await (await fetch(`${server.url}/api/v1/sites/T/my-tasks`, {
    headers: { authorization: `Bearer ${token}` },
  })).json()).tasks;
});

after(() => server?.stop());

/** The phone's device record (its token and its person), read from its IndexedDB. */
function deviceOf(page) {
  return page.evaluate(() => new Promise((resolve, reject) => {
    const r = indexedDB.open("cairn-phone");
    r.onerror = () => reject(r.error);
    r.onsuccess = () => {
      const get = r.result.transaction("kv").objectStore("kv").get("device");
      get.onsuccess = () => { r.result.close(); resolve(get.result ?? null); };
      get.onerror = () => reject(get.error);
    };
  }));
}

/** Fills and sends the sign-in form (the caution screen may follow). */
async function fillSignIn(page, who) {
  await page.fill("input[name=user]", who.user);
  await page.fill("input[name=pin]", who.pin);
  await page.fill("input[name=site]", "t");
  await page.click("#signin-form button");
}

test("counts waiting on a shared phone are sent only as their maker's", async () => {
  const browser = await launchPhone();
  try {
    const page = await browser.context.newPage();
    await signIn(page, server);
    await controlled(page);
    await browser.context.setOffline(true);
    const task = tasks.find((t) => t.bin === "A-01-01-1");
    await openBin(page, task.bin, task.label);
    for (let i = 0; i < 3; i++) await scan(page, bolt.each, 3);
    await lines(page, 3);
    const waiting = await outbox(page);
    assert.equal(waiting.length, 4, "bin opened and three lines wait");
    assert.ok(waiting.every((e) => e.user === COUNTER.user), "every event names its maker");

    // The phone is signed out while offline (its token revoked), so the counts stay.
    const device = await deviceOf(page);
    const gone = await fetch(`${server.url}/api/v1/device`, {
      method: "DELETE", headers: { authorization: `Bearer ${device.token}` },
    });
    assert.ok(gone.ok, `the device is revoked: ${gone.status}`);
    await browser.context.setOffline(false);
    await page.waitForSelector("#signin:not([hidden])", { timeout: 30_000 });
    assert.equal(await outboxCount(page), 4, "nothing was lost when the phone was signed out");

    // Another counter may not sign in while the maker's counts wait.
    await fillSignIn(page, OTHER);
    await page.waitForFunction(() => /made by esme/.test(document.getElementById("signin-error").textContent));
    const said = await page.textContent("#signin-error");
    assert.match(said, /4 count events made by esme, not sent yet/);
    assert.ok(await page.isVisible("#signin:not([hidden])"), "still on the sign-in page");
    assert.equal(await outboxCount(page), 4);
    assert.equal(await deviceOf(page), null, "no device was enrolled for rosa");

    // The offer fills in the maker; once they sign in, the counts go out as theirs.
    await page.click("#signin-as-maker");
    assert.equal(await page.inputValue("input[name=user]"), COUNTER.user);
    await fillSignIn(page, COUNTER);
    if (await page.waitForSelector("#caution:not([hidden])", { timeout: 3_000 }).catch(() => null)) {
      await page.click("#caution-ok");
    }
    await page.waitForFunction(() => globalThis.cairnOutboxCount().then((n) => n === 0), null,
      { timeout: 60_000, polling: 250 }).catch(() => {});
    assert.equal(await outboxCount(page), 0, "the maker's counts were sent");
    const linesHeld = await server.api("GET", "/api/v1/sites/T/count-lines?after=0");
    const here = linesHeld.lines.filter((l) => l.bin === task.bin);
    assert.equal(here.length, 3, "the three lines reached the server");
    assert.ok(waiting.filter((e) => e.type === "line").every((e) => here.some((l) => l.uid === e.id)));
    const problems = await page.evaluate(() => new Promise((resolve) => {
      const r = indexedDB.open("cairn-phone");
      r.onsuccess = () => {
        const all = r.result.transaction("problems").objectStore("problems").getAll();
        all.onsuccess = () => { r.result.close(); resolve(all.result); };
      };
    }));
    assert.deepEqual(problems, [], "nothing was refused");
  } finally {
    await browser.close();
  }
});
