// Shared set-up for the browser suites: a real `cairn serve` on a loopback port over a
// fresh database, and headless Chromium from Debian's package.
import { spawn, execFileSync } from "node:child_process";
import { mkdtempSync, rmSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, dirname } from "node:path";
import { fileURLToPath } from "node:url";
import { createInterface } from "node:readline";
import { chromium } from "playwright-core";

export const ROOT = join(dirname(fileURLToPath(import.meta.url)), "..", "..");
const BIN = process.env.CAIRN_BIN ?? join(ROOT, "target", "debug", "cairn");

/** Runs the `cairn` binary with `args`, feeding `input` on standard input; returns its output. */
export function cairn(args, input = "") {
  return execFileSync(BIN, args, { input, encoding: "utf8" });
}

/**
 * Starts `cairn serve` on 127.0.0.1:0 over a new database with site T; returns {url, stop}.
 * `prepare(db, dir)` runs before the server starts (imports, users, a saved list);
 * `env` adds environment variables to the server's.
 */
export async function startServer({ prepare, env } = {}) {
  const dir = mkdtempSync(join(tmpdir(), "cairn-browser-"));
  const db = join(dir, "t.db");
  execFileSync(BIN, ["site", "add", "--db", db, "--code", "T", "--name", "Browser test"]);
  if (prepare) await prepare(db, dir);
  const child = spawn(BIN, ["serve", "--db", db, "--listen", "127.0.0.1:0"], {
    stdio: ["ignore", "pipe", "inherit"],
    env: { ...process.env, ...env },
  });
  const line = await new Promise((resolve, reject) => {
    const rl = createInterface({ input: child.stdout });
    rl.once("line", resolve);
    child.once("exit", (code) => reject(new Error(`cairn serve exited with ${code}`)));
  });
  const url = line.split(" at ")[1].trim().replace(/\/$/, "");
  return {
    url,
    stop() {
      child.kill("SIGTERM");
      rmSync(dir, { recursive: true, force: true });
    },
  };
}

/** Launches headless Chromium with the flags that work on this machine. */
export async function launch(extraArgs = []) {
  const userDataDir = mkdtempSync(join(tmpdir(), "cairn-chromium-"));
  const context = await chromium.launchPersistentContext(userDataDir, {
    executablePath: "/usr/bin/chromium",
    headless: true,
    args: [
      "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
      "--disable-background-networking", "--disable-component-update", "--disable-sync",
      ...extraArgs,
    ],
  });
  return {
    context,
    async close() {
      await context.close();
      rmSync(userDataDir, { recursive: true, force: true });
    },
  };
}
