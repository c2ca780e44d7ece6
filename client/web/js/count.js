// What a scan means for the count in hand, with no I/O: pure functions the app and its
// tests share. Quantities are integers in the item's base unit.

/** Builds the GTIN → {item, pack} look-up from catalogue items (or the tasks' items). */
export function gtinIndex(items) {
  const index = new Map();
  for (const item of items) for (const pack of item.packs ?? []) index.set(pack.gtin, { item, pack });
  return index;
}

/** Merges the catalogue with the items of the tasks, so a task's items are known even without it. */
export function knownItems(catalog, tasks) {
  const bySku = new Map((catalog?.items ?? []).map((i) => [i.sku, i]));
  for (const t of tasks ?? []) for (const i of t.items ?? []) if (!bySku.has(i.sku)) bySku.set(i.sku, i);
  return [...bySku.values()];
}

/** Returns the line events of a pass that are not undone, in the order they were made. */
export function activeLines(events) {
  const undone = new Set(events.filter((e) => e.type === "undo").map((e) => e.line));
  return events.filter((e) => e.type === "line" && !undone.has(e.id)).sort((a, b) => (a.id < b.id ? -1 : 1));
}

/** Sums the counted base units per SKU (the counter's own count, never a book figure). */
export function totals(lines) {
  const out = new Map();
  for (const l of lines) out.set(l.sku, (out.get(l.sku) ?? 0) + l.qty);
  return out;
}

/**
 * Decides what a parsed scan does. `ctx`: {open (the bin being counted or null), task (the
 * task chosen and waiting for its label, or null), tasks, index}. Returns one of
 * {action: "open", task, label} | {action: "line", item, pack, lot, expiry, found} |
 * {action: "refuse", message, level} — refusals record nothing.
 */
export function decide(parsed, ctx) {
  const s = parsed.scan;
  if (s.kind === "bin") {
    const label = s.bin.text;
    if (ctx.open) {
      if (label === ctx.open.label) return refuse(`You are already counting ${ctx.open.bin}.`, "warn");
      return refuse(`Wrong bin: this label is ${label}, but you are counting ${ctx.open.bin}. Nothing recorded.`);
    }
    if (ctx.task) {
      if (label === ctx.task.label) return { action: "open", task: ctx.task, label };
      return refuse(`Wrong bin: this label is ${label}, the task is ${ctx.task.bin} (${ctx.task.label}). Nothing recorded.`);
    }
    const task = (ctx.tasks ?? []).find((t) => t.label === label);
    if (task) return { action: "open", task, label };
    return refuse(`Bin ${label} is not in your list today. Nothing recorded.`);
  }
  if (s.kind === "item") {
    if (!ctx.open) return refuse("Scan the bin label first, then the items in it.");
    const hit = ctx.index.get(s.gtin);
    if (!hit) return refuse(`Unknown GTIN ${s.gtin}: no item of this site has it. Nothing recorded.`);
    return {
      action: "line",
      item: hit.item,
      pack: hit.pack,
      lot: s.lot ?? "",
      expiry: s.expiry ?? null,
      found: !(ctx.open.expected ?? []).includes(hit.item.sku),
    };
  }
  if (s.kind === "pallet") return refuse(`That is a pallet label (SSCC ${s.sscc}): scan each item's own barcode.`);
  if (s.kind === "details") return refuse("This code carries no GTIN (only lot or dates): scan the item's product barcode.");
  return refuse(`Not a barcode Cairn reads: "${s.text}". Nothing recorded.`);
}

function refuse(message, level = "error") {
  return { action: "refuse", message, level };
}
