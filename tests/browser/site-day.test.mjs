// The phone's "today" is the site's: a site a day away from UTC, on a phone whose own zone is
// a third one. The list the server gives for the site's day is today's list on the phone,
// not a stale one, however the phone's or UTC's date differs.
import { test, before, after } from "node:test";
import assert from "node:assert/strict";
import { startServer, seedSite, dayIn, today } from "./harness.mjs";
import { launchPhone, signIn } from "./phone.mjs";

// Pacific/Pago_Pago keeps UTC−11 and Pacific/Kiritimati UTC+14, without daylight saving
// (tz database). Before 11:00 UTC Pago Pago is still on yesterday; from 10:00 UTC Kiritimati
// is on tomorrow: one of them is always on another date than UTC. The phone's zone is one
// whose date is UTC's at that hour, so it is another date than the site's too.
const early = new Date().getUTCHours() < 10;
const SITE_ZONE = early ? "Pacific/Pago_Pago" : "Pacific/Kiritimati";
const PHONE_ZONE = early ? "Asia/Tokyo" : "America/Chicago";

let server, siteDay;

before(async () => {
  server = await startServer({ site: true, zone: SITE_ZONE });
  siteDay = dayIn(SITE_ZONE);
  await seedSite(server, siteDay);
});

after(() => server?.stop());

test("the phone counts on the site's day, not its own nor UTC's", async () => {
  assert.notEqual(siteDay, today(), `${SITE_ZONE} is on another date than UTC`);
  const browser = await launchPhone([], { timezoneId: PHONE_ZONE });
  try {
    const page = await browser.context.newPage();
    const phoneDay = await page.evaluate(() => {
      const d = new Date();
      return `${d.getFullYear()}-${String(d.getMonth() + 1).padStart(2, "0")}-${String(d.getDate()).padStart(2, "0")}`;
    });
    assert.notEqual(phoneDay, siteDay, `the phone (${PHONE_ZONE}) is on another date than the site`);
    await signIn(page, server);
    const list = await page.evaluate(() => new Promise((resolve, reject) => {
      const r = indexedDB.open("cairn-phone");
      r.onerror = () => reject(r.error);
      r.onsuccess = () => {
        const get = r.result.transaction("kv").objectStore("kv").get("list");
        get.onsuccess = () => { r.result.close(); resolve(get.result); };
      };
    }));
    assert.equal(list.day, siteDay, "my-tasks gave the site's day without being asked for one");
    assert.equal(list.time_zone, SITE_ZONE);
    assert.equal(list.today, siteDay);
    assert.ok(await page.isHidden("#stale"), `no stale warning: ${await page.textContent("#stale")}`);
  } finally {
    await browser.close();
  }
});
