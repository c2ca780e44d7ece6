// The count-list pages' small script. The pages work without it; with it the
// progress figures and each task's status follow the server every few seconds
// without a reload, and the labels page gets a print button.
(function () {
  "use strict";

  const printButton = document.querySelector("[data-print]");
  if (printButton) {
    printButton.hidden = false;
    printButton.addEventListener("click", () => window.print());
  }

  const box = document.querySelector("[data-progress-url]");
  if (!box) return;
  const url = box.dataset.progressUrl;
  const every = Math.max(1000, Number(box.dataset.refreshMs) || 10000);
  const note = document.getElementById("live-note");
  const words = { not_started: "not started", in_progress: "in progress", done: "done" };

  const clock = (s) => `${Math.floor(s / 60)}:${String(s % 60).padStart(2, "0")}`;
  const tally = (t) => `${t.tasks} · ${clock(t.est_s)}`;

  function put(run, part, text) {
    const cell = box.querySelector(`[data-run="${run}"][data-part="${part}"]`);
    if (cell && cell.textContent !== text) cell.textContent = text;
  }

  function show(p) {
    const rows = p.runs.map((r) => [String(r.run), r]);
    rows.push(["all", p.total]);
    for (const [key, r] of rows) {
      put(key, "not_started", tally(r.not_started));
      put(key, "in_progress", tally(r.in_progress));
      put(key, "done", tally(r.done));
      put(key, "done_pct", `${r.done_pct} %`);
    }
    let reshaped = document.querySelectorAll("[data-task]").length !== p.tasks.length;
    for (const t of p.tasks) {
      const cell = document.querySelector(`[data-task="${t.id}"]`);
      if (!cell || cell.dataset.taskRun !== String(t.run)) {
        reshaped = true;
        continue;
      }
      if (cell.dataset.stage !== t.stage) {
        cell.dataset.stage = t.stage;
        cell.className = `stage ${t.stage}`;
        cell.textContent = words[t.stage] || t.stage;
      }
    }
    box.dataset.version = String(p.version);
    note.textContent = reshaped
      ? "Tasks have moved or the list was rebuilt since this page was opened: reload it to see the runs as they are now."
      : `Up to date at ${new Date().toLocaleTimeString()}; refreshed every ${Math.round(every / 1000)} s.`;
  }

  async function refresh() {
    try {
      const r = await fetch(url, { credentials: "same-origin", headers: { accept: "application/json" } });
      if (!r.ok) throw new Error(`the server answered ${r.status}`);
      show(await r.json());
    } catch (e) {
      note.textContent = `Live figures paused (${e.message}); trying again shortly.`;
    }
    setTimeout(refresh, every);
  }

  note.textContent = `Refreshed every ${Math.round(every / 1000)} s.`;
  setTimeout(refresh, every);
})();
