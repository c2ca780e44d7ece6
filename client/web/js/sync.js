// Sends the outbox to the server (docs/phone-sync.md): batches of at most 500, oldest first,
// the device clock and the previous round trip with each request; removes only events the
// server answered; backs off with jitter when there is no answer. Runs in the page and in
// the service worker (Background Sync); a Web Lock keeps the two from sending at once.

import * as db from "./db.js";

/** Most events in one request (the server's MAX_SYNC_EVENTS). */
export const MAX_SYNC_EVENTS = 500;
/** Longest round trip the server takes as a clock sample (its MAX_RTT_MS); longer: none sent. */
export const MAX_RTT_MS = 120_000;
/** Retry delays: first, and the ceiling (ms); each retry doubles, then a random 50–100 %. */
export const RETRY_FIRST_MS = 1000;
export const RETRY_MAX_MS = 60_000;

/** Returns a retry delay for the `attempt`-th failure in a row (full doubling, half jitter). */
export function backoff(attempt, random = Math.random) {
  const ceiling = Math.min(RETRY_MAX_MS, RETRY_FIRST_MS * 2 ** Math.min(attempt, 16));
  return Math.round(ceiling * (0.5 + random() / 2));
}

/** Fetches `path` with the device token, timing the round trip into kv `rtt_ms`. */
export async function call(device, path, init = {}) {
  const started = performance.now();
  const r = await fetch(path, {
    ...init,
    headers: { ...(init.headers ?? {}), authorization: `Bearer ${device.token}` },
    cache: "no-store",
  });
  await db.set("rtt_ms", Math.round(performance.now() - started));
  return r;
}

/** Why a sync stopped: `done`, `offline` (no answer / 5xx), `revoked` (401), `refused` (4xx). */
export class SyncOutcome {
  constructor(state, sent, message = "", held = []) {
    this.state = state;
    this.sent = sent;
    this.message = message;
    /** Bins whose counts the server holds for a manager's review (the phone's clock moved). */
    this.held = held;
  }
}

/**
 * Sends every waiting event, batch after batch; `progress(sent, total)` after each.
 * Returns a SyncOutcome; never throws for network trouble.
 */
export async function syncOutbox(progress = () => {}) {
  const run = async () => {
    const device = await db.get("device");
    if (!device) return new SyncOutcome("done", 0, "not signed in");
    let total = await db.outboxCount();
    let sent = 0;
    const held = new Set();
    progress(sent, total);
    for (;;) {
      // Only the signed-in person's events: anyone else's wait for them (the sign-in page
      // lets nobody else in while they do). An event from before events named their maker
      // goes as it was recorded (the server takes it as the signed-in person's, and a
      // resend of it stays a repeat).
      const batch = (await db.outboxBatch(MAX_SYNC_EVENTS))
        .filter((e) => (e.user ?? device.user) === device.user);
      if (batch.length === 0) break;
      const body = {
        device_clock: Date.now(),
        rtt_ms: usableRtt(await db.get("rtt_ms")),
        events: batch.map(({ site: _site, ...e }) => e),
      };
      let r;
      try {
        r = await call(device, `/api/v1/sites/${encodeURIComponent(device.site)}/sync`, {
          method: "POST",
          headers: { "content-type": "application/json" },
          body: JSON.stringify(body),
        });
      } catch (e) {
        return new SyncOutcome("offline", sent, `no connection (${e.message})`);
      }
      if (r.status === 401) return new SyncOutcome("revoked", sent, await text(r));
      if (r.status >= 500) return new SyncOutcome("offline", sent, `the server answered ${r.status}`);
      if (!r.ok) return new SyncOutcome("refused", sent, `${r.status}: ${await text(r)}`);
      const answer = await r.json();
      const bins = new Map(batch.map((e) => [e.id, e.bin]));
      for (const res of answer.results ?? []) {
        if ((res.flags ?? []).includes("held") && bins.has(res.id)) held.add(bins.get(res.id));
      }
      const removed = await db.settle(batch, answer.results ?? []);
      if (removed === 0) return new SyncOutcome("refused", sent, "the server answered no event");
      sent += removed;
      total = Math.max(total, sent + (await db.outboxCount()));
      await db.set("clock", {
        offset_ms: answer.offset_ms ?? null,
        uncertainty_ms: answer.uncertainty_ms ?? null,
        server_clock: answer.server_clock ?? null,
      });
      await db.set("last_sync", Date.now());
      progress(sent, total);
    }
    return new SyncOutcome("done", sent, "", [...held]);
  };
  if (globalThis.navigator?.locks) {
    return navigator.locks.request("cairn-sync", run);
  }
  return run();
}

function usableRtt(ms) {
  return Number.isInteger(ms) && ms >= 0 && ms <= MAX_RTT_MS ? ms : null;
}

async function text(r) {
  try {
    const t = await r.text();
    try {
      return JSON.parse(t).error ?? t;
    } catch {
      return t;
    }
  } catch {
    return "";
  }
}
