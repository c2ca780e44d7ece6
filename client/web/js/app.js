// The counter's phone app: sign-in once, the caution screen, today's bins, counting a bin,
// and the sync status. Every event is on disk (IndexedDB) before the screen confirms it.

import init, { parseScan } from "../pkg/cairn_scan.js";
import * as db from "./db.js";
import { uuid7 } from "./uuid7.js";
import { syncOutbox, backoff, call } from "./sync.js";
import { listenForScanner } from "./scanner.js";
import { feedback } from "./feedback.js";
import { decide, gtinIndex, knownItems, activeLines, totals } from "./count.js";

/** A list fetched longer ago than this is flagged stale (ms). */
export const STALE_AFTER_MS = 12 * 3600_000;
/** How often the list is checked against the server while online (ms). */
export const LIST_CHECK_MS = 5 * 60_000;
/** Wait after a scan before syncing, so a burst of scans goes in one request (ms). */
export const SYNC_SETTLE_MS = 1500;
/** From this many waiting events a sync shows a progress bar. */
export const PROGRESS_FROM = 100;
/** Largest quantity the keypad takes. */
export const MAX_KEYPAD_QTY = 999_999;

const $ = (sel) => document.querySelector(sel);
const state = {
  device: null,
  list: null, // {day, version, run, tasks, fetched_at}
  pendingList: null, // a newer list held back while a bin is open
  catalog: null,
  index: new Map(),
  open: null, // {count, task, bin, label, expected, opened_at}
  chosen: null, // a task waiting for its bin label
  lines: [],
  closed: new Map(), // task id -> "bin_done" | "bin_empty"
  waiting: 0,
  lastSync: null,
  syncing: false,
  retry: 0,
  retryTimer: null,
  settleTimer: null,
  persist: null,
  screen: "loading",
  message: null,
  updateReady: false,
  keypad: null, // {digits, target}
};

// ---------- small DOM helpers ----------

function h(tag, attrs = {}, ...children) {
  const el = document.createElement(tag);
  for (const [k, v] of Object.entries(attrs)) {
    if (v === null || v === undefined || v === false) continue;
    if (k.startsWith("on")) el.addEventListener(k.slice(2), v);
    else if (k === "class") el.className = v;
    else el.setAttribute(k, v === true ? "" : v);
  }
  for (const c of children.flat()) if (c !== null && c !== undefined && c !== false) el.append(c);
  return el;
}

function show(screen) {
  state.screen = screen;
  for (const s of document.querySelectorAll("main > section")) s.hidden = s.id !== screen;
  document.body.dataset.screen = screen;
  render();
}

function say(text, level = "ok") {
  state.message = { text, level };
  const m = $("#msg");
  m.textContent = text;
  m.dataset.state = level;
  m.hidden = !text;
}

/** Shows (or with "" clears) a note about syncing, apart from the scan messages. */
function note(text) {
  $("#sync-note").textContent = text;
  $("#sync-note").hidden = !text;
}

const clock = (ms) => new Date(ms).toLocaleTimeString([], { hour: "2-digit", minute: "2-digit" });
/**
 * Returns today's date (YYYY-MM-DD) at the site, from the zone the server gave with the list:
 * the site's day, never the phone's own zone or UTC. Without a zone (a list from an older
 * server), UTC.
 */
function siteToday(zone) {
  try {
    const parts = new Intl.DateTimeFormat("en-CA", {
      timeZone: zone || "UTC", year: "numeric", month: "2-digit", day: "2-digit",
    }).formatToParts(new Date());
    const part = (type) => parts.find((p) => p.type === type).value;
    return `${part("year")}-${part("month")}-${part("day")}`;
  } catch {
    return new Date().toISOString().slice(0, 10);
  }
}

// ---------- status strip (always visible) ----------

function renderStatus() {
  const online = navigator.onLine;
  $("#net").textContent = online ? "Online" : "Offline";
  $("#net").dataset.state = online ? "ok" : "off";
  $("#waiting").textContent = `${state.waiting} waiting`;
  $("#waiting").dataset.state = state.waiting ? "warn" : "ok";
  $("#last-sync").textContent = state.lastSync ? `synced ${clock(state.lastSync)}` : "never synced";
}

function progress(sent, total) {
  const bar = $("#progress");
  bar.hidden = !(total >= PROGRESS_FROM && sent < total);
  bar.max = Math.max(total, 1);
  bar.value = sent;
  $("#sync-progress-text").textContent = total ? `${sent} of ${total} sent` : "";
}

// ---------- screens ----------

function render() {
  renderStatus();
  $("#update").hidden = !state.updateReady;
  const stale = state.screen === "today" || state.screen === "bin" ? staleReason() : null;
  $("#stale").hidden = !stale;
  $("#stale").textContent = stale ?? "";
  if (state.screen === "today") renderToday();
  if (state.screen === "bin") renderBin();
  if (state.screen === "sync") renderSync();
  $("#who").textContent = state.device ? `${state.device.display_name} · ${state.device.site}` : "";
}

function staleReason() {
  const l = state.list;
  if (!l) return null;
  if (state.pendingList && state.pendingList.version > l.version) {
    return `The list changed on the server (version ${state.pendingList.version}, this phone holds ${l.version}): it is loaded when this bin is done.`;
  }
  if (l.day !== siteToday(l.time_zone)) return `This list is for ${l.day}, not today at the site: refresh when you have a connection.`;
  if (Date.now() - l.fetched_at > STALE_AFTER_MS) {
    return `This list was fetched at ${new Date(l.fetched_at).toLocaleString()}: refresh when you have a connection.`;
  }
  return null;
}

function taskDone(t) {
  return t.done || state.closed.has(t.id);
}

function renderToday() {
  const sec = $("#today-list");
  sec.replaceChildren();
  $("#persist-warning").hidden = state.persist !== false;
  const l = state.list;
  if (!l) {
    $("#today-progress").textContent = "No list on this phone yet.";
    return;
  }
  const done = l.tasks.filter(taskDone).length;
  $("#today-progress").textContent = l.tasks.length
    ? `${done} of ${l.tasks.length} bins done · ${l.day}`
    : `No bins for you on ${l.day}.`;
  $("#today-bar").max = Math.max(l.tasks.length, 1);
  $("#today-bar").value = done;
  for (const t of l.tasks) {
    const isDone = taskDone(t);
    sec.append(h("li", { class: isDone ? "task done" : "task", "data-bin": t.bin },
      h("button", {
        class: "task-button",
        disabled: isDone,
        onclick: () => chooseTask(t),
      },
      h("span", { class: "seq" }, String(t.seq)),
      h("span", { class: "bin" }, t.bin),
      h("span", { class: "meta" }, t.kind === "recount" ? "recount" : `${t.items.length} item${t.items.length === 1 ? "" : "s"}`),
      h("span", { class: "state" }, isDone ? (state.closed.get(t.id) === "bin_empty" ? "empty" : "done") : "to do"))));
  }
}

function renderBin() {
  const o = state.open;
  const t = o ? state.list?.tasks.find((x) => x.id === o.task) : state.chosen;
  $("#bin-title").textContent = o ? `Counting ${o.bin}` : `Go to ${t?.bin ?? "the bin"}`;
  $("#bin-hint").textContent = o
    ? "Scan each item or case. Keypad for many of the same."
    : `Scan the bin label of ${t?.bin}. Nothing is recorded until the right label is scanned.`;
  for (const id of ["#undo", "#keypad-open", "#bin-empty", "#bin-done"]) $(id).disabled = !o;
  $("#bin-leave").hidden = Boolean(o);
  const items = $("#bin-items");
  items.replaceChildren();
  const sums = totals(state.lines);
  const expected = t?.items ?? [];
  const names = new Map(knownItems(state.catalog, state.list?.tasks).map((i) => [i.sku, i]));
  const skus = [...new Set([...expected.map((i) => i.sku), ...sums.keys()])];
  for (const sku of skus) {
    const item = names.get(sku);
    const found = !expected.some((i) => i.sku === sku);
    items.append(h("li", { class: found ? "found" : "", "data-sku": sku },
      h("span", { class: "sku" }, sku),
      h("span", { class: "desc" }, item?.description ?? "", found ? " — found stock" : ""),
      h("span", { class: "counted" }, sums.has(sku) ? `${sums.get(sku)} ${item?.base_unit ?? ""}` : "—")));
  }
  const lines = $("#lines");
  lines.replaceChildren();
  for (const l of [...state.lines].reverse()) {
    lines.append(h("li", { "data-id": l.id },
      h("span", { class: "sku" }, l.sku),
      h("span", {}, `${l.packs} × ${l.qty / l.packs}`),
      h("span", { class: "qty" }, `= ${l.qty}`),
      l.lot ? h("span", { class: "lot" }, `lot ${l.lot}`) : null,
      l.expiry ? h("span", { class: "lot" }, `exp ${l.expiry}`) : null,
      h("span", { class: "entry" }, l.entry)));
  }
  $("#line-count").textContent = `${state.lines.length} line${state.lines.length === 1 ? "" : "s"}`;
}

async function renderSync() {
  $("#sync-waiting").textContent = String(state.waiting);
  $("#sync-last").textContent = state.lastSync ? new Date(state.lastSync).toLocaleString() : "never";
  const c = await db.get("clock");
  $("#sync-clock").textContent = c?.offset_ms !== undefined && c?.offset_ms !== null
    ? `${c.offset_ms} ms ± ${c.uncertainty_ms} ms` : "not measured yet";
  $("#sync-storage").textContent = state.persist === null ? "not asked"
    : state.persist ? "kept (persistent storage granted)"
      : "not guaranteed (the browser refused persistent storage): sync often";
  const list = $("#problems");
  list.replaceChildren();
  const probs = await db.problems();
  $("#problems-none").hidden = probs.length > 0;
  for (const p of probs) {
    list.append(h("li", { class: "problem" },
      h("strong", {}, `${p.status}: `), `${p.type} ${p.bin}${p.sku ? ` ${p.sku} ${p.qty}` : ""} — ${p.reason}`,
      h("button", { class: "small", onclick: async () => { await db.dismissProblem(p.id); renderSync(); } }, "Dismiss")));
  }
  $("#forget").disabled = state.waiting > 0;
}

// ---------- sign-in and caution ----------

async function signIn(ev) {
  ev.preventDefault();
  const f = new FormData(ev.target);
  const body = {
    user: String(f.get("user")).trim(),
    pin: String(f.get("pin")),
    site: String(f.get("site")).trim().toUpperCase(),
    device_name: String(f.get("device_name")).trim() || "phone",
  };
  $("#signin-error").textContent = "";
  // Counts waiting on this phone belong to the person who made them: nobody else signs in
  // until they are sent, or they would be lost (the server refuses them from anyone else).
  const waiting = (await db.outboxMakers()).filter((m) => m.user !== body.user);
  if (waiting.length > 0) {
    const m = waiting[0];
    $("#signin-error").textContent =
      `This phone still holds ${m.count} count event${m.count === 1 ? "" : "s"} made by ${m.user}, not sent yet. ` +
      `${m.user} must sign in first so they are sent (they are kept until then); then ${body.user} can sign in.`;
    const offer = h("button", { type: "button", class: "small", id: "signin-as-maker" }, `Sign in as ${m.user} to send them`);
    offer.addEventListener("click", () => {
      ev.target.elements.user.value = m.user;
      ev.target.elements.pin.focus();
    });
    $("#signin-error").append(" ", offer);
    return;
  }
  let r;
  try {
    r = await fetch("/api/v1/devices", {
      method: "POST", headers: { "content-type": "application/json" }, body: JSON.stringify(body),
    });
  } catch {
    $("#signin-error").textContent = "No connection: signing in needs the network once.";
    return;
  }
  const answer = await r.json().catch(() => ({}));
  if (!r.ok) {
    $("#signin-error").textContent = answer.error ?? `The server answered ${r.status}.`;
    return;
  }
  state.device = { token: answer.token, device_id: answer.device_id, site: answer.site, user: answer.user, display_name: answer.display_name };
  await db.set("device", state.device);
  ev.target.reset();
  await askPersist();
  await afterSignIn();
}

async function askPersist() {
  if (!navigator.storage?.persist) {
    state.persist = false;
  } else {
    state.persist = (await navigator.storage.persisted()) || (await navigator.storage.persist());
  }
  await db.set("persist", state.persist);
}

async function afterSignIn() {
  if (!(await db.get("caution_ack"))) {
    show("caution");
    return;
  }
  await startWork();
}

async function acknowledgeCaution() {
  await db.set("caution_ack", Date.now());
  await startWork();
}

// ---------- the day's list ----------

async function refresh() {
  if (!state.device) return;
  $("#refresh").disabled = true;
  try {
    const site = encodeURIComponent(state.device.site);
    const r = await call(state.device, `/api/v1/sites/${site}/my-tasks`);
    if (r.status === 401) return revoked();
    const answer = await r.json();
    if (!r.ok) {
      note(answer.error ?? `The list could not be read (${r.status}).`);
      return;
    }
    const list = { ...answer, fetched_at: Date.now() };
    note("");
    if (state.open && state.list && list.version !== state.list.version) {
      state.pendingList = list;
      await db.set("list_pending", list);
    } else {
      await setList(list);
    }
    await refreshCatalog();
  } catch {
    note("No connection: the list on the phone is used.");
  } finally {
    $("#refresh").disabled = false;
    render();
  }
}

async function setList(list) {
  state.list = list;
  state.pendingList = null;
  await db.set("list", list);
  await db.del("list_pending");
  rebuildIndex();
}

async function refreshCatalog() {
  const site = encodeURIComponent(state.device.site);
  const headers = state.catalog?.etag ? { "if-none-match": state.catalog.etag } : {};
  const r = await call(state.device, `/api/v1/sites/${site}/catalog`, { headers });
  if (r.status === 304 || !r.ok) return; // 404: a server without the catalogue; tasks' items serve
  const answer = await r.json();
  state.catalog = { ...answer, etag: r.headers.get("etag") };
  await db.set("catalog", state.catalog);
  rebuildIndex();
}

function rebuildIndex() {
  state.index = gtinIndex(knownItems(state.catalog, state.list?.tasks));
}

async function loadClosed() {
  state.closed = new Map();
  for (const e of await db.journalAll()) {
    if ((e.type === "bin_done" || e.type === "bin_empty") && e.task !== null) state.closed.set(e.task, e.type);
  }
}

// ---------- counting ----------

function chooseTask(t) {
  state.chosen = t;
  state.lines = [];
  say(`Go to ${t.bin} and scan its label.`, "ok");
  show("bin");
}

async function commit(type, fields, kv = null) {
  const now = Date.now();
  const id = uuid7(now);
  const o = state.open;
  // Each event names who made it, so counts left on a shared phone are never sent as the
  // next person's (the server refuses an event whose person is not the token's).
  const event = { id, at: now, user: state.device.user, count: o?.count ?? id, task: o?.task ?? fields.task ?? null, bin: o?.bin ?? fields.bin, type, ...fields };
  if (type === "bin_opened") event.count = id;
  await db.record(event, kv ? kv(event) : null);
  state.waiting += 1;
  renderStatus();
  if (navigator.onLine) scheduleSync(SYNC_SETTLE_MS);
  else registerBackgroundSync();
  return event;
}

async function onScan(text, entry = "scan", keyAt = null) {
  if (state.screen !== "today" && state.screen !== "bin") return;
  let parsed;
  try {
    parsed = parseScan(text, new Date().getFullYear());
  } catch (e) {
    feedback("error");
    say(`${e.message}. Nothing recorded.`, "error");
    return;
  }
  const d = decide(parsed, { open: state.open, task: state.screen === "bin" ? state.chosen : null, tasks: state.list?.tasks, index: state.index });
  if (d.action === "refuse") {
    feedback(d.level);
    say(d.message, d.level);
    return;
  }
  if (d.action === "open") {
    const t = d.task;
    if (taskDone(t)) {
      feedback("warn");
      say(`${t.bin} is already done today.`, "warn");
      return;
    }
    await commit("bin_opened", { task: t.id, bin: t.bin, label: d.label }, (ev) => ({
      open: { count: ev.id, task: t.id, bin: t.bin, label: d.label, expected: t.items.map((i) => i.sku), opened_at: ev.at },
    }));
    state.open = await db.get("open");
    state.chosen = t;
    state.lines = [];
    feedback("ok");
    say(`Counting ${t.bin}: scan the items.`, "ok");
    show("bin");
    return;
  }
  const ev = await commit("line", {
    sku: d.item.sku, gtin: d.pack.gtin, packs: 1, qty: d.pack.units, lot: d.lot, expiry: d.expiry, entry,
  });
  state.lines.push(ev);
  // From the scanner's last key to the line on disk, for the benchmark (User Timing API).
  if (keyAt !== null) performance.measure("cairn:scan-to-disk", { start: keyAt, end: performance.now() });
  feedback(d.found ? "warn" : "ok");
  const what = `${d.item.sku} +${d.pack.units}${d.pack.units > 1 ? ` (${d.pack.level} of ${d.pack.units})` : ""}`;
  say(d.found ? `Found stock: ${what} — not expected in this bin, recorded.` : `${what} recorded.`, d.found ? "warn" : "ok");
  renderBin();
}

async function undo() {
  const last = state.lines.at(-1);
  if (!last) {
    say("Nothing to undo.", "warn");
    return;
  }
  await commit("undo", { line: last.id });
  state.lines.pop();
  feedback("ok");
  say(`Undone: ${last.sku} ${last.qty}.`, "ok");
  renderBin();
}

async function closeBin(type) {
  if (!state.open) return;
  if (type === "bin_empty" && state.lines.length) {
    feedback("error");
    say("This bin has lines: undo them first, or press Bin done.", "error");
    return;
  }
  if (type === "bin_done" && !state.lines.length) {
    feedback("warn");
    say("No items counted yet: scan them, or press Bin is empty if it holds nothing.", "warn");
    return;
  }
  const o = state.open;
  if (camera) await toggleCamera();
  // "Empty" is a finding about the bin; "done" closes the pass (and the task) on the server.
  if (type === "bin_empty") await commit("bin_empty", {});
  await commit("bin_done", {}, () => ({ open: undefined }));
  state.closed.set(o.task, type);
  state.open = null;
  state.chosen = null;
  state.lines = [];
  feedback("ok");
  say(type === "bin_empty" ? `${o.bin}: recorded as empty.` : `${o.bin}: done.`, "ok");
  if (state.pendingList) await setList(state.pendingList);
  show("today");
  maybeActivateUpdate();
}

function openKeypad() {
  if (!state.open) return;
  const last = state.lines.at(-1);
  const task = state.list?.tasks.find((t) => t.id === state.open.task);
  const choices = [];
  if (last) {
    const hit = state.index.get(last.gtin);
    if (hit) choices.push({ label: `${hit.item.sku} · ${hit.pack.level} of ${hit.pack.units}`, sku: hit.item.sku, gtin: hit.pack.gtin, units: hit.pack.units });
  }
  for (const i of task?.items ?? []) choices.push({ label: `${i.sku} · ${i.base_unit}`, sku: i.sku, gtin: null, units: 1 });
  if (!choices.length) {
    say("Scan one of the items first, then key how many.", "warn");
    return;
  }
  state.keypad = { digits: "", choices, target: 0 };
  renderKeypad();
  $("#keypad").hidden = false;
}

function renderKeypad() {
  const k = state.keypad;
  $("#keypad-value").textContent = k.digits || "0";
  const sel = $("#keypad-target");
  sel.replaceChildren(...k.choices.map((c, i) => h("option", { value: String(i), selected: i === k.target }, c.label)));
  const c = k.choices[k.target];
  const n = Number(k.digits || "0");
  $("#keypad-total").textContent = c.units > 1 ? `= ${n * c.units} units` : "";
}

function keypadPress(key) {
  const k = state.keypad;
  if (key === "del") k.digits = k.digits.slice(0, -1);
  else if (key === "clear") k.digits = "";
  else if ((k.digits + key).length <= 6) k.digits = (k.digits + key).replace(/^0+/, "");
  renderKeypad();
}

async function keypadAdd() {
  const k = state.keypad;
  const n = Number(k.digits || "0");
  const c = k.choices[k.target];
  if (!Number.isInteger(n) || n <= 0 || n > MAX_KEYPAD_QTY) {
    say("Key a quantity above 0.", "warn");
    return;
  }
  const ev = await commit("line", { sku: c.sku, gtin: c.gtin, packs: n, qty: n * c.units, lot: "", expiry: null, entry: "keypad" });
  state.lines.push(ev);
  $("#keypad").hidden = true;
  state.keypad = null;
  feedback("ok");
  say(`${c.sku} +${n * c.units} recorded.`, "ok");
  renderBin();
}

// ---------- camera ----------

let camera = null;

async function toggleCamera() {
  if (camera) {
    camera.stop();
    camera = null;
    $("#camera").hidden = true;
    $("#camera-toggle").textContent = "Camera";
    return;
  }
  $("#camera").hidden = false;
  $("#camera-toggle").textContent = "Close camera";
  try {
    const { openCamera } = await import("./camera.js");
    camera = await openCamera($("#camera video"), (text) => onScan(text, "camera"));
    $("#camera").dataset.decoder = camera.decoder;
  } catch (e) {
    $("#camera").hidden = true;
    $("#camera-toggle").textContent = "Camera";
    say(`The camera did not open: ${e.message}`, "error");
  }
}

// ---------- sync ----------

function scheduleSync(delay) {
  clearTimeout(state.settleTimer);
  state.settleTimer = setTimeout(() => syncNow(), delay);
}

async function syncNow() {
  clearTimeout(state.settleTimer);
  clearTimeout(state.retryTimer);
  if (state.syncing || !state.device) return;
  state.syncing = true;
  document.body.dataset.syncing = "yes";
  try {
    const outcome = await syncOutbox(progress);
    state.waiting = await db.outboxCount();
    state.lastSync = (await db.get("last_sync")) ?? state.lastSync;
    if (outcome.state === "done") {
      state.retry = 0;
      note(outcome.held.length === 0 ? "" :
        `Sent, but the count of ${outcome.held.join(", ")} goes to a manager's review: this phone's clock ` +
        "changed while the bin was being counted, so its times cannot be trusted. Keep the phone's date and time automatic.");
    } else if (outcome.state === "offline") {
      const wait = backoff(state.retry++);
      state.retryTimer = setTimeout(syncNow, wait);
      registerBackgroundSync();
    } else if (outcome.state === "revoked") {
      revoked();
    } else {
      note(`The server refused the outbox: ${outcome.message}. Nothing was lost; ask your supervisor.`);
    }
  } finally {
    state.syncing = false;
    document.body.dataset.syncing = "no";
    progress(0, 0);
    render();
  }
}

async function registerBackgroundSync() {
  try {
    const reg = await navigator.serviceWorker?.ready;
    await reg?.sync?.register("cairn-outbox");
  } catch {
    // Not every browser has Background Sync; the online event and the timer cover it.
  }
}

async function revoked() {
  await db.del("device");
  state.device = null;
  $("#signin-error").textContent = "This phone was signed out by the server: sign in again. Counts waiting on the phone are kept and sent after.";
  show("signin");
}

async function forget() {
  if (state.waiting > 0) return;
  try {
    await call(state.device, "/api/v1/device", { method: "DELETE" });
  } catch {
    // Offline: the admin can revoke the phone from the admin pages.
  }
  await db.del("device");
  state.device = null;
  show("signin");
}

// ---------- updates of the app itself ----------

let registration = null;

async function registerWorker() {
  if (!("serviceWorker" in navigator)) return;
  // The first worker's claim of a new page is no update; any later change of worker is.
  let controlled = Boolean(navigator.serviceWorker.controller);
  registration = await navigator.serviceWorker.register("sw.js", { type: "module", scope: "./", updateViaCache: "none" });
  const offer = () => {
    if (registration.waiting && navigator.serviceWorker.controller) {
      state.updateReady = true;
      render();
      maybeActivateUpdate();
    }
  };
  registration.addEventListener("updatefound", () => {
    const w = registration.installing;
    w?.addEventListener("statechange", () => { if (w.state === "installed") offer(); });
  });
  offer();
  let reloading = false;
  navigator.serviceWorker.addEventListener("controllerchange", () => {
    if (!controlled) {
      controlled = true;
      return;
    }
    if (reloading) return;
    reloading = true;
    location.reload();
  });
  navigator.serviceWorker.addEventListener("message", async (ev) => {
    if (ev.data?.type === "synced") {
      state.waiting = await db.outboxCount();
      state.lastSync = (await db.get("last_sync")) ?? state.lastSync;
      render();
    }
  });
}

/** Lets a waiting new version take over, but never while a bin is open. */
function maybeActivateUpdate() {
  if (state.updateReady && !state.open && registration?.waiting) {
    registration.waiting.postMessage({ type: "skip-waiting" });
  }
}

// ---------- start ----------

async function startWork() {
  state.list = (await db.get("list")) ?? null;
  state.pendingList = (await db.get("list_pending")) ?? null;
  state.catalog = (await db.get("catalog")) ?? null;
  state.open = (await db.get("open")) ?? null;
  rebuildIndex();
  await loadClosed();
  if (state.open) {
    state.chosen = state.list?.tasks.find((t) => t.id === state.open.task) ?? null;
    state.lines = activeLines(await db.journalFor(state.open.count));
    show("bin");
  } else {
    show("today");
  }
  if (navigator.onLine) {
    refresh();
    syncNow();
  }
}

function wire() {
  $("#signin-form").addEventListener("submit", signIn);
  $("#caution-ok").addEventListener("click", acknowledgeCaution);
  $("#refresh").addEventListener("click", refresh);
  $("#status").addEventListener("click", () => show("sync"));
  $("#sync-now").addEventListener("click", syncNow);
  $("#sync-back").addEventListener("click", () => show(state.open || state.chosen ? "bin" : "today"));
  $("#forget").addEventListener("click", forget);
  $("#undo").addEventListener("click", undo);
  $("#bin-empty").addEventListener("click", () => closeBin("bin_empty"));
  $("#bin-done").addEventListener("click", () => closeBin("bin_done"));
  $("#bin-leave").addEventListener("click", () => { state.chosen = null; say("", "ok"); show("today"); });
  $("#keypad-open").addEventListener("click", openKeypad);
  $("#keypad-cancel").addEventListener("click", () => { $("#keypad").hidden = true; state.keypad = null; });
  $("#keypad-add").addEventListener("click", keypadAdd);
  $("#keypad-target").addEventListener("change", (ev) => { state.keypad.target = Number(ev.target.value); renderKeypad(); });
  for (const b of document.querySelectorAll("#keypad [data-key]")) b.addEventListener("click", () => keypadPress(b.dataset.key));
  $("#camera-toggle").addEventListener("click", toggleCamera);
  $("#type-code").addEventListener("submit", (ev) => {
    ev.preventDefault();
    const field = ev.target.elements.code;
    const text = field.value.replaceAll("\\x1d", "\x1d");
    field.value = "";
    field.blur();
    if (text) onScan(text, "scan");
  });
  $("#update-now").addEventListener("click", maybeActivateUpdate);
  window.addEventListener("online", () => { state.retry = 0; render(); syncNow(); refresh(); });
  window.addEventListener("offline", render);
  listenForScanner(document, (text, at) => onScan(text, "scan", at),
    () => state.screen === "today" || state.screen === "bin",
    (text) => { feedback("error"); say(`A scan stopped before its end ("${text}"): scan again. Nothing recorded.`, "error"); });
  // Pull down at the top of the list to refresh it.
  let pullFrom = null;
  const list = $("#today");
  list.addEventListener("touchstart", (e) => { pullFrom = window.scrollY === 0 ? e.touches[0].clientY : null; }, { passive: true });
  list.addEventListener("touchend", (e) => {
    if (pullFrom !== null && e.changedTouches[0].clientY - pullFrom > 90) refresh();
    pullFrom = null;
  });
  setInterval(() => { if (navigator.onLine && state.device && !state.syncing) refresh(); }, LIST_CHECK_MS);
  setInterval(() => registration?.update().catch(() => {}), 3600_000);
}

async function main() {
  wire();
  registerWorker().catch((e) => console.warn("service worker:", e));
  await init();
  await db.pruneJournal(Date.now() - db.JOURNAL_KEEP_MS);
  state.waiting = await db.outboxCount();
  state.lastSync = (await db.get("last_sync")) ?? null;
  state.persist = (await db.get("persist")) ?? null;
  state.device = (await db.get("device")) ?? null;
  document.body.dataset.ready = "yes";
  if (!state.device) {
    show("signin");
    return;
  }
  await afterSignIn();
}

main().catch((e) => {
  say(`The app did not start: ${e.message}`, "error");
});

// For the test suites and the benchmark: how many events wait, read from disk.
globalThis.cairnOutboxCount = () => db.outboxCount();
