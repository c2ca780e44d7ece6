// Hardware scanners that type into the page ("keyboard wedge"): a document keydown listener
// assembles fast bursts of keys ending in Enter or Tab, so no visible text field has to keep
// the focus. GS (ASCII 29) arrives as Ctrl+] or as the character itself; AIM symbology
// prefixes such as ]C1 ]E0 ]d2 ]Q3 are kept for the parser to read.

/**
 * Longest gap between two keys of one scan (ms). Scanners send a key every few ms; the
 * limit is generous because a busy phone delays key events, and whatever a person types
 * here still goes through the parser, so a false burst only earns a clear refusal.
 */
export const MAX_KEY_GAP_MS = 300;
/** Fewest characters a scan has (shorter bursts are taken as typing). */
export const MIN_SCAN_CHARS = 3;
/** Longest scan kept (characters); a stuck key must not grow the buffer forever. */
export const MAX_SCAN_CHARS = 512;

const GS = "\x1d";

/** Says whether keys aimed at `el` belong to a text field rather than the scanner. */
function editable(el) {
  return el && (el.isContentEditable || el.tagName === "INPUT" || el.tagName === "TEXTAREA" || el.tagName === "SELECT");
}

/**
 * Listens on `target` (the document) and calls `onScan(text, endAt)` for each burst (`endAt`:
 * the time stamp of the ending key, on the performance clock); `enabled()`
 * says whether scans are wanted now; `onCutShort(text)` hears of a burst that stopped
 * without its Enter or Tab. Returns a function that stops listening.
 */
export function listenForScanner(target, onScan, enabled = () => true, onCutShort = () => {}) {
  let buf = "";
  let last = 0;
  const onKey = (ev) => {
    if (editable(ev.target) || !enabled()) return;
    const now = ev.timeStamp || performance.now();
    if (now - last > MAX_KEY_GAP_MS) {
      if (buf.length >= MIN_SCAN_CHARS) onCutShort(buf);
      buf = "";
    }
    last = now;
    if (ev.key === "Enter" || ev.key === "Tab") {
      if (buf.length >= MIN_SCAN_CHARS) {
        ev.preventDefault(); // do not click the focused button or move the focus
        const text = buf;
        buf = "";
        onScan(text, now);
      } else {
        buf = "";
      }
      return;
    }
    let ch = null;
    if (ev.ctrlKey && (ev.key === "]" || ev.code === "BracketRight")) ch = GS;
    else if (ev.key === GS) ch = GS;
    else if (ev.key.length === 1 && !ev.ctrlKey && !ev.metaKey && !ev.altKey) ch = ev.key;
    if (ch === null) return; // Shift and other modifiers arrive between characters
    if (ch === GS) ev.preventDefault();
    if (buf.length < MAX_SCAN_CHARS) buf += ch;
  };
  target.addEventListener("keydown", onKey, true);
  return () => target.removeEventListener("keydown", onKey, true);
}
