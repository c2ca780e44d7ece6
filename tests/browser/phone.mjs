// Helpers for the phone-app suites: sign a fresh browser in, read its outbox.
import { COUNTER, launch } from "./harness.mjs";

/** Opens the app, signs in as the counter and acknowledges the caution screen. */
export async function signIn(page, server) {
  await page.goto(`${server.url}/app/`);
  await page.waitForSelector("#signin:not([hidden])");
  await page.fill("input[name=user]", COUNTER.user);
  await page.fill("input[name=pin]", COUNTER.pin);
  await page.fill("input[name=site]", "t");
  await page.fill("input[name=device_name]", "test phone");
  await page.click("#signin-form button");
  await page.waitForSelector("#caution:not([hidden])");
  await page.click("#caution-ok");
  await page.waitForSelector("#today:not([hidden]) .task");
}

/** Waits until the service worker controls the page (so the shell is cached). */
export async function controlled(page) {
  await page.waitForFunction(() => navigator.serviceWorker.controller !== null, null, { timeout: 15_000 });
}

/** The number of events in the outbox, read from IndexedDB by the page. */
export const outboxCount = (page) => page.evaluate(() => globalThis.cairnOutboxCount());

/** Types `text` as a keyboard-wedge scanner does: fast keys, then Enter. */
export async function scan(page, text, delay = 4) {
  await page.keyboard.type(text, { delay });
  await page.keyboard.press("Enter");
}

/** Waits for the scan message to read `pattern`; returns its state (ok, warn, error). */
export async function message(page, pattern) {
  await page.waitForFunction((src) => new RegExp(src).test(document.getElementById("msg").textContent),
    pattern.source, { timeout: 10_000 });
  return page.getAttribute("#msg", "data-state");
}

/** Every event in one of the app's IndexedDB stores, oldest first (UUIDv7 keys sort by time). */
function readStore(page, store) {
  return page.evaluate((name) => new Promise((resolve, reject) => {
    const r = indexedDB.open("cairn-phone");
    r.onerror = () => reject(r.error);
    r.onsuccess = () => {
      const all = r.result.transaction(name).objectStore(name).getAll();
      all.onsuccess = () => { r.result.close(); resolve(all.result); };
      all.onerror = () => reject(all.error);
    };
  }), store);
}

/** The events still waiting to be sent. */
export const outbox = (page) => readStore(page, "outbox");

/** Every event the phone recorded (kept after sync, with its status). */
export const journal = (page) => readStore(page, "journal");

/** Taps the task of `bin` and scans its label; waits until the bin is open. */
export async function openBin(page, bin, label) {
  await page.click(`#today-list .task[data-bin="${bin}"] button`);
  await page.waitForSelector("#bin:not([hidden])");
  await scan(page, label);
  await page.waitForFunction((b) => document.getElementById("bin-title").textContent === `Counting ${b}`, bin);
}

/** Waits until the open bin shows `n` lines. */
export async function lines(page, n) {
  await page.waitForFunction((k) => document.querySelectorAll("#lines li").length === k, n, { timeout: 20_000 });
}

/** A phone's screen in CSS pixels (a common small Android size). */
export const PHONE = { width: 360, height: 740 };

/** Launches Chromium with a phone-sized window (options as `launch`). */
export const launchPhone = (args = [], options = {}) => launch(args, { viewport: PHONE, ...options });
