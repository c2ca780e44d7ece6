// The phone's IndexedDB: settings (kv), the outbox of events not yet acknowledged, the
// journal of the day's events (kept after sync so an open bin can be redrawn), and the
// problems the server refused. Works in the page and in the service worker.

const NAME = "cairn-phone";
const VERSION = 1;
/** Journal entries older than this are dropped at start (ms). */
export const JOURNAL_KEEP_MS = 3 * 86400_000;

let opening = null;

/** Opens the database once (the schema only ever gains stores, so an update keeps data). */
export function open() {
  opening ??= new Promise((resolve, reject) => {
    const req = indexedDB.open(NAME, VERSION);
    req.onupgradeneeded = () => {
      const db = req.result;
      if (!db.objectStoreNames.contains("kv")) db.createObjectStore("kv");
      if (!db.objectStoreNames.contains("outbox")) db.createObjectStore("outbox", { keyPath: "id" });
      if (!db.objectStoreNames.contains("journal")) {
        db.createObjectStore("journal", { keyPath: "id" }).createIndex("count", "count");
      }
      if (!db.objectStoreNames.contains("problems")) db.createObjectStore("problems", { keyPath: "id" });
    };
    req.onsuccess = () => {
      // Another tab or a new worker asking for a newer schema: step aside.
      req.result.onversionchange = () => req.result.close();
      resolve(req.result);
    };
    req.onerror = () => reject(req.error);
  });
  return opening;
}

/** Runs `body(tx)` in one transaction over `stores`; resolves with its result once committed. */
async function tx(stores, mode, body) {
  const db = await open();
  return new Promise((resolve, reject) => {
    const t = db.transaction(stores, mode, { durability: "strict" });
    let out;
    t.oncomplete = () => resolve(out);
    t.onerror = () => reject(t.error);
    t.onabort = () => reject(t.error ?? new Error("the transaction was aborted"));
    Promise.resolve(body(t)).then((v) => { out = v; }, (e) => { t.abort(); reject(e); });
  });
}

const req = (r) => new Promise((resolve, reject) => {
  r.onsuccess = () => resolve(r.result);
  r.onerror = () => reject(r.error);
});

export const get = (key) => tx(["kv"], "readonly", (t) => req(t.objectStore("kv").get(key)));
export const set = (key, value) => tx(["kv"], "readwrite", (t) => { t.objectStore("kv").put(value, key); });
export const del = (key) => tx(["kv"], "readwrite", (t) => { t.objectStore("kv").delete(key); });

/**
 * Writes an event to the outbox and the journal in one transaction, and optionally a kv
 * entry with it; resolves only when both are on disk.
 */
export function record(event, kv = null) {
  return tx(["outbox", "journal", "kv"], "readwrite", (t) => {
    t.objectStore("outbox").add(event);
    t.objectStore("journal").put({ ...event, status: "waiting" });
    if (kv) for (const [k, v] of Object.entries(kv)) {
      if (v === undefined) t.objectStore("kv").delete(k);
      else t.objectStore("kv").put(v, k);
    }
  });
}

/** Returns up to `limit` outbox events, oldest first (UUIDv7 ids sort by time). */
export const outboxBatch = (limit) =>
  tx(["outbox"], "readonly", (t) => req(t.objectStore("outbox").getAll(null, limit)));

/** Returns who made the events waiting in the outbox: [{user, count}], most first. */
export function outboxMakers() {
  return tx(["outbox"], "readonly", async (t) => {
    const counts = new Map();
    for (const e of await req(t.objectStore("outbox").getAll())) {
      if (e.user) counts.set(e.user, (counts.get(e.user) ?? 0) + 1);
    }
    return [...counts].map(([user, count]) => ({ user, count })).sort((a, b) => b.count - a.count);
  });
}

export const outboxCount = () => tx(["outbox"], "readonly", (t) => req(t.objectStore("outbox").count()));

/**
 * Removes every sent event that has a result; refused ones move to the problems list.
 * Results are matched by id; an event without a result stays in the outbox.
 */
export function settle(sent, results) {
  const byId = new Map(sent.map((e) => [e.id, e]));
  return tx(["outbox", "journal", "problems"], "readwrite", async (t) => {
    const journal = t.objectStore("journal");
    let removed = 0;
    for (const r of results) {
      const ev = byId.get(r.id);
      if (!ev) continue;
      t.objectStore("outbox").delete(r.id);
      removed += 1;
      if (r.status !== "accepted") {
        t.objectStore("problems").put({ ...ev, status: r.status, reason: r.reason ?? "", seen_at: Date.now() });
      }
      const j = await req(journal.get(r.id));
      if (j) journal.put({ ...j, status: r.status, flags: r.flags ?? [] });
    }
    return removed;
  });
}

export const journalFor = (count) =>
  tx(["journal"], "readonly", (t) => req(t.objectStore("journal").index("count").getAll(count)));

export const journalAll = () => tx(["journal"], "readonly", (t) => req(t.objectStore("journal").getAll()));

export const problems = () => tx(["problems"], "readonly", (t) => req(t.objectStore("problems").getAll()));

export const dismissProblem = (id) =>
  tx(["problems"], "readwrite", (t) => { t.objectStore("problems").delete(id); });

/** Drops journal entries already synced and older than `beforeMs` (never the outbox). */
export function pruneJournal(beforeMs) {
  return tx(["journal"], "readwrite", async (t) => {
    const all = await req(t.objectStore("journal").getAll());
    for (const e of all) if (e.at < beforeMs && e.status !== "waiting") t.objectStore("journal").delete(e.id);
  });
}
