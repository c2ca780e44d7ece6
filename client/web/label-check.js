// Label check: runs the same scan rules as the server, compiled to WebAssembly.
import init, { parseScan } from "./pkg/cairn_scan.js";

const out = document.getElementById("out");
const form = document.getElementById("check");
const field = document.getElementById("code");

init().then(() => {
  out.textContent = "Ready.";
  form.addEventListener("submit", (ev) => {
    ev.preventDefault();
    const text = field.value.replaceAll("\\x1d", "\x1d").replaceAll("\\x1D", "\x1d");
    try {
      out.textContent = JSON.stringify(parseScan(text, new Date().getFullYear()), null, 2);
      out.dataset.state = "ok";
    } catch (e) {
      out.textContent = e.message;
      out.dataset.state = "error";
    }
    field.select();
  });
}).catch((e) => {
  out.textContent = "The scan rules did not load: " + e;
});
