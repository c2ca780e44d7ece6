// What the counter hears and feels: a short high beep and a tap for a good scan, two low
// tones and a longer buzz for a refused one (Web Audio and the Vibration API, when present).

let audio = null;

function tone(freq, start, length, ctx) {
  const osc = ctx.createOscillator();
  const gain = ctx.createGain();
  osc.type = "square";
  osc.frequency.value = freq;
  gain.gain.setValueAtTime(0.0001, ctx.currentTime + start);
  gain.gain.exponentialRampToValueAtTime(0.25, ctx.currentTime + start + 0.01);
  gain.gain.exponentialRampToValueAtTime(0.0001, ctx.currentTime + start + length);
  osc.connect(gain).connect(ctx.destination);
  osc.start(ctx.currentTime + start);
  osc.stop(ctx.currentTime + start + length + 0.02);
}

function context() {
  const Ctx = globalThis.AudioContext ?? globalThis.webkitAudioContext;
  if (!Ctx) return null;
  audio ??= new Ctx();
  if (audio.state === "suspended") audio.resume().catch(() => {});
  return audio;
}

/** Plays the sound and vibration of `kind`: "ok", "warn" or "error". */
export function feedback(kind) {
  document.body.dataset.feedback = kind;
  try {
    const ctx = context();
    if (ctx) {
      if (kind === "ok") tone(1760, 0, 0.07, ctx);
      else if (kind === "warn") { tone(1320, 0, 0.07, ctx); tone(1320, 0.12, 0.07, ctx); }
      else { tone(220, 0, 0.16, ctx); tone(180, 0.22, 0.22, ctx); }
    }
  } catch {
    // Sound is a help, never a reason to lose a scan.
  }
  const pattern = { ok: 40, warn: [40, 60, 40], error: [180, 80, 180] }[kind];
  if (navigator.vibrate) navigator.vibrate(pattern);
}
