// The camera: the browser's BarcodeDetector where it exists, else the WebAssembly decoder
// (pkg/cairn_camera.js, loaded only now, when the camera first opens).

/** Widest frame handed to the wasm decoder (px); larger frames are scaled down. */
export const MAX_FRAME_WIDTH = 640;
/** Pause between decode attempts (ms), so the phone stays cool. */
export const FRAME_INTERVAL_MS = 120;
/** The same code is not reported twice within this time (ms). */
export const REPEAT_HOLD_MS = 1500;

const FORMATS = ["ean_13", "ean_8", "upc_a", "upc_e", "code_128", "qr_code", "data_matrix"];
let wasm = null;

async function detector() {
  if ("BarcodeDetector" in globalThis) {
    const supported = await globalThis.BarcodeDetector.getSupportedFormats();
    const d = new globalThis.BarcodeDetector({ formats: FORMATS.filter((f) => supported.includes(f)) });
    return { name: "browser", detect: async (video) => (await d.detect(video))[0]?.rawValue ?? null };
  }
  wasm ??= import("../pkg/cairn_camera.js").then(async (m) => { await m.default(); return m; });
  const m = await wasm;
  const canvas = document.createElement("canvas");
  const g = canvas.getContext("2d", { willReadFrequently: true });
  return {
    name: "wasm",
    detect: async (video) => {
      const scale = Math.min(1, MAX_FRAME_WIDTH / video.videoWidth);
      canvas.width = Math.round(video.videoWidth * scale);
      canvas.height = Math.round(video.videoHeight * scale);
      if (!canvas.width || !canvas.height) return null;
      g.drawImage(video, 0, 0, canvas.width, canvas.height);
      const px = g.getImageData(0, 0, canvas.width, canvas.height);
      const got = m.decodeFrame(new Uint8Array(px.data.buffer), canvas.width, canvas.height);
      return got?.text ?? null;
    },
  };
}

/**
 * Opens the back camera into `video` and calls `onCode(text)` for each code read.
 * Returns {stop, decoder} where decoder says which path reads the frames.
 */
export async function openCamera(video, onCode) {
  const stream = await navigator.mediaDevices.getUserMedia({
    video: { facingMode: "environment", width: { ideal: 1280 } }, audio: false,
  });
  video.srcObject = stream;
  video.setAttribute("playsinline", "");
  video.muted = true;
  await video.play();
  const d = await detector();
  let running = true;
  let lastText = "";
  let lastAt = 0;
  (async () => {
    while (running) {
      try {
        const text = await d.detect(video);
        const now = performance.now();
        if (text && (text !== lastText || now - lastAt > REPEAT_HOLD_MS)) {
          lastText = text;
          lastAt = now;
          onCode(text);
        }
      } catch {
        // A frame that cannot be read is skipped.
      }
      await new Promise((r) => setTimeout(r, FRAME_INTERVAL_MS));
    }
  })();
  return {
    decoder: d.name,
    stop() {
      running = false;
      for (const t of stream.getTracks()) t.stop();
      video.srcObject = null;
    },
  };
}
