// Shared set-up for the browser suites: a real `cairn serve` on a loopback port over a
// fresh database, and headless Chromium from Debian's package.
import { spawn, execFileSync } from "node:child_process";
import { mkdtempSync, rmSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, dirname } from "node:path";
import { fileURLToPath } from "node:url";
import { createInterface } from "node:readline";
import { chromium } from "playwright-core";

export const ROOT = join(dirname(fileURLToPath(import.meta.url)), "..", "..");
export const BIN = process.env.CAIRN_BIN ?? join(ROOT, "target", "debug", "cairn");

/** The counter the phone suites sign in as (test-only secrets). */
export const COUNTER = { user: "esme", pin: "2468", display: "Esme Tulloch" };
const ADMIN = { user: "ada", password: "test-only-password-ada" };

/**
 * The PostgreSQL server the suites run on instead of a SQLite file, when
 * `CAIRN_TEST_STORE` names one (`postgres://…`); each server a test starts gets a database
 * of its own there, dropped when the test stops it.
 */
const PG = (process.env.CAIRN_TEST_STORE ?? "").startsWith("postgres") ? process.env.CAIRN_TEST_STORE : null;
let pgCount = 0;

/** Runs `sql` on the PostgreSQL server's administrative database with psql. */
function pgAdmin(sql) {
  execFileSync("psql", ["-X", "-q", "-v", "ON_ERROR_STOP=1", "-d", PG, "-c", sql], { encoding: "utf8" });
}

/**
 * A new, empty database for one server: a file in `dir` (`name`), or on PostgreSQL a
 * database of its own (`{db, drop}`).
 */
function freshDb(dir, name) {
  if (!PG) return { db: join(dir, name), drop() {} };
  const db_name = `cairn_test_browser_${process.pid}_${++pgCount}`;
  pgAdmin(`drop database if exists ${db_name}`);
  pgAdmin(`create database ${db_name}`);
  const url = new URL(PG);
  url.pathname = `/${db_name}`;
  return {
    db: url.toString(),
    drop() {
      try {
        pgAdmin(`drop database if exists ${db_name} with (force)`);
      } catch (e) {
        console.error(`could not drop ${db_name}: ${e.message}`);
      }
    },
  };
}

/** Runs the `cairn` binary with `args`, feeding `input` on standard input; returns its output. */
export function cairn(args, input = "") {
  return execFileSync(BIN, args, { input, encoding: "utf8" });
}

/**
 * Starts `cairn serve` on 127.0.0.1:0 over a new database with site T; returns
 * {url, db, token, api, stop}.
 * - `prepare(db, dir)` runs before the server starts (imports, users, a saved list);
 * - `env` adds environment variables to the server's;
 * - `site: true` gives the site a counter with a PIN and an admin's integration token
 *   (`token`, used by `api(method, path, body)`), made through the CLI;
 * - `webDir` serves the phone app from another folder (through a config file's `web_dir`,
 *   the development override) instead of the files compiled into the binary;
 * - `halt()` stops it and `resume({webDir})` starts it again at the same address and database.
 */
export async function startServer({ prepare, env, site = false, webDir = null, zone = "UTC" } = {}) {
  const dir = mkdtempSync(join(tmpdir(), "cairn-browser-"));
  const store = freshDb(dir, "t.db");
  const db = store.db;
  cairn(["site", "add", "--db", db, "--code", "T", "--name", "Browser test", "--time-zone", zone]);
  let token = null;
  if (site) {
    cairn(["user", "add", "--db", db, "--site", "T", "--name", ADMIN.user,
      "--roles", "admin,supervisor,inventory_manager", "--password-stdin"], `${ADMIN.password}\n`);
    cairn(["user", "add", "--db", db, "--site", "T", "--name", COUNTER.user,
      "--display-name", COUNTER.display, "--roles", "counter", "--with-pin", "--password-stdin"],
      `test-only-password-esme\n${COUNTER.pin}\n`);
    token = cairn(["user", "token", "--db", db, "--site", "T", "--name", ADMIN.user,
      "--role", "admin", "--label", "browser tests"]).trim().split(/\s+/).pop();
  }
  if (prepare) await prepare(db, dir);
  // Starts `cairn serve` on `listen`; the config file names the development folder, if any.
  const serve = async (listen, folder) => {
    const args = ["serve", "--db", db, "--listen", listen];
    if (folder) {
      writeFileSync(join(dir, "cairn.toml"), `web_dir = ${JSON.stringify(folder)}\n`);
      args.push("--config", join(dir, "cairn.toml"));
    }
    const child = spawn(BIN, args, {
      stdio: ["ignore", "pipe", "inherit"],
      env: { ...process.env, ...env },
    });
    const line = await new Promise((resolve, reject) => {
      const rl = createInterface({ input: child.stdout });
      rl.once("line", resolve);
      child.once("exit", (code) => reject(new Error(`cairn serve exited with ${code}`)));
    });
    return { child, url: line.split(" at ")[1].trim().replace(/\/$/, "") };
  };
  let { child, url } = await serve("127.0.0.1:0", webDir);
  const halt = async () => {
    if (child.exitCode !== null || child.signalCode !== null) return;
    const exited = new Promise((resolve) => child.once("exit", resolve));
    child.kill("SIGTERM");
    await exited;
  };
  const api = async (method, path, body) => {
    const r = await fetch(`${url}${path}`, {
      method,
      headers: { authorization: `Bearer ${token}`, "content-type": "application/json" },
      body: body === undefined ? undefined : JSON.stringify(body),
    });
    const text = await r.text();
    if (!r.ok) throw new Error(`${method} ${path}: ${r.status} ${text}`);
    return text ? JSON.parse(text) : null;
  };
  return {
    url,
    db,
    token,
    api,
    /** Stops the server, keeping its database (a phone then finds no server). */
    halt,
    /**
     * Starts the server again at the same address over the same database, serving the
     * app compiled in, or `webDir`'s files when given (another version of the app).
     */
    async resume({ webDir: folder = null } = {}) {
      await halt();
      ({ child } = await serve(new URL(url).host, folder));
    },
    async stop() {
      await halt();
      store.drop();
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/**
 * Starts `cairn demo --small` on 127.0.0.1:0 over a new database: the fictional demo
 * site (60 items, the last 4 weeks counted) and its demo people; returns {url, stop}.
 */
export async function startDemo() {
  const dir = mkdtempSync(join(tmpdir(), "cairn-demo-"));
  const store = freshDb(dir, "demo.db");
  const child = spawn(BIN, ["demo", "--small", "--db", store.db, "--listen", "127.0.0.1:0"], {
    stdio: ["ignore", "pipe", "inherit"],
    env: { RUST_LOG: "warn", ...process.env },
  });
  const line = await new Promise((resolve, reject) => {
    const rl = createInterface({ input: child.stdout });
    rl.once("line", resolve);
    child.once("exit", (code) => reject(new Error(`cairn demo exited with ${code}`)));
  });
  // Later lines (the demo's sign-ins) are read and dropped so the pipe never fills.
  child.stdout.resume();
  return {
    url: line.split(" at ")[1].trim().replace(/\/$/, ""),
    async stop() {
      if (child.exitCode === null && child.signalCode === null) {
        const exited = new Promise((resolve) => child.once("exit", resolve));
        child.kill("SIGTERM");
        await exited;
      }
      store.drop();
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/** Adds the GS1 mod-10 check digit to a GTIN body (GS1 General Specifications §7.9.1). */
export function gtin(body) {
  const digits = [...body].map(Number).reverse();
  const sum = digits.reduce((s, d, i) => s + d * (i % 2 === 0 ? 3 : 1), 0);
  return body + String((10 - (sum % 10)) % 10);
}

/** The test site's items: an each and a case GTIN per item (invented data). */
export const ITEMS = [
  { sku: "KL-1001", description: "Hex bolt M8 x 40", base_unit: "each", each: gtin("0501234500010"), case: gtin("1501234500017"), units: 12, bin: "A-01-01-1" },
  { sku: "KL-1002", description: "Flat washer M8", base_unit: "each", each: gtin("0501234500020"), case: gtin("1501234500024"), units: 50, bin: "A-01-02-1" },
  { sku: "KL-1003", description: "Cable tie 300 mm", base_unit: "each", each: gtin("0501234500030"), case: gtin("1501234500031"), units: 100, bin: "A-01-03-1" },
  { sku: "KL-2001", description: "Sealant cartridge", base_unit: "each", each: gtin("0501234500040"), case: gtin("1501234500048"), units: 6, bin: null, lot_tracked: true },
];

/** Today's date (UTC), as the server's my-tasks default uses it. */
export const today = () => new Date().toISOString().slice(0, 10);

/** Returns today's date (YYYY-MM-DD) in IANA zone `zone`, by the JavaScript engine's own tz data. */
export function dayIn(zone) {
  const parts = new Intl.DateTimeFormat("en-CA", { timeZone: zone, year: "numeric", month: "2-digit", day: "2-digit" })
    .formatToParts(new Date());
  const part = (type) => parts.find((p) => p.type === type).value;
  return `${part("year")}-${part("month")}-${part("day")}`;
}

/**
 * Gives the site bins, items with each and case packs, stock in three bins, and `day`'s
 * count list (default: today in UTC) with its one run held by the counter; returns the list.
 */
export async function seedSite(server, day = today()) {
  const { api } = server;
  await api("PUT", "/api/v1/sites/T/planning/calendar",
    { working_weekdays: ["mon", "tue", "wed", "thu", "fri", "sat", "sun"], holidays: [] });
  await api("POST", "/api/v1/sites/T/bins", [1, 2, 3, 4].map((bay) =>
    ({ zone: "A", aisle: 1, bay, level: 1, side: bay % 2 ? "L" : "R" })));
  await api("POST", "/api/v1/sites/T/items", ITEMS.map((i) => ({
    sku: i.sku, description: i.description, base_unit: i.base_unit, unit_cost_minor: 120,
    lot_tracked: Boolean(i.lot_tracked),
  })));
  await api("POST", "/api/v1/sites/T/packs", ITEMS.flatMap((i) => [
    { sku: i.sku, gtin: i.each, level: "each", units: 1 },
    { sku: i.sku, gtin: i.case, level: "case", units: i.units },
  ]));
  const at = new Date(Date.now() - 3 * 86400_000).toISOString();
  await api("POST", "/api/v1/sites/T/movements", ITEMS.filter((i) => i.bin).map((i, n) => ({
    id: `seed-${n}`, bin: i.bin, sku: i.sku, qty: 40 + n, kind: "receipt", event_at: at,
  })));
  await api("POST", `/api/v1/sites/T/planning/abc?day=${day}`, {});
  const list = await api("POST", "/api/v1/sites/T/count-lists",
    { day, counters: 1, minutes: 480, fill: "capacity" });
  await api("PUT", `/api/v1/sites/T/count-lists/${day}/runs/1`, { holder: COUNTER.user });
  return list;
}

/** Chromium's flags that work on this machine. */
const FLAGS = [
  "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
  "--disable-background-networking", "--disable-component-update", "--disable-sync",
];

/**
 * Launches headless Chromium with the flags that work on this machine, on a fresh
 * user-data dir (or `userDataDir` to test persistence across a browser restart).
 */
export async function launch(extraArgs = [], { userDataDir, viewport, offline = false, timezoneId } = {}) {
  const fresh = !userDataDir;
  const dir = userDataDir ?? mkdtempSync(join(tmpdir(), "cairn-chromium-"));
  const context = await chromium.launchPersistentContext(dir, {
    executablePath: "/usr/bin/chromium",
    headless: true,
    viewport: viewport ?? undefined,
    offline,
    timezoneId,
    args: [...FLAGS, ...extraArgs],
  });
  // The server's content security policy and the pages it serves must agree: a
  // violation Chromium reports fails the suite when its browser closes.
  const violations = [];
  context.on("console", (m) => {
    if (/Content Security Policy/i.test(m.text())) violations.push(`${m.location().url}: ${m.text()}`);
  });
  return {
    context,
    userDataDir: dir,
    violations,
    /**
     * Closes the browser; removes its user-data dir unless `keep`. A CSP violation seen
     * meanwhile is printed and fails the suite's process (not thrown: the caller's own
     * clean-up, such as stopping the server, must still run).
     */
    async close({ keep = false } = {}) {
      await context.close().catch(() => {});
      if (fresh && !keep) rmSync(dir, { recursive: true, force: true });
      if (violations.length) {
        console.error(`content security policy violations:\n${violations.join("\n")}`);
        process.exitCode = 1;
      }
    },
  };
}
