// The bench with three years stored (the 20-test, two-level daily lab of
// `cargo bench --bench records`, which writes target/bench-records-store.json), in
// headless Chromium against dist/cuvette.html. Prints, from one run: the cold start to
// an interactive Today board against a floor page that only reads and JSON-parses the
// same stored characters (written beside the store, target/bench-floor.html), as a
// ratio; the time to open each view; a first control value typed → its decision shown;
// a QC run saved → its row shown; and the WebAssembly memory against the stored size.
// Not part of the test suite: timings are never asserted. Invented data for measuring.
// With CUVETTE_PROFILE=1 (best on a build with names, CUVETTE_APP=...), the typed value
// and the save are also recorded by Chromium's CPU profiler and the functions with the
// most time of their own are printed for each.
import { readFileSync, writeFileSync } from "node:fs";
import { fileURLToPath, pathToFileURL } from "node:url";
import { openApp, newProfile, byTestId, waitReady, waitSaved } from "./helpers.mjs";

const storeUrl = new URL("../../target/bench-records-store.json", import.meta.url);
const store = JSON.parse(readFileSync(storeUrl, "utf8"));
const chars = Object.entries(store).reduce((n, [k, v]) => n + k.length + v.length, 0);
const floorFile = fileURLToPath(new URL("../../target/bench-floor.html", import.meta.url));
writeFileSync(floorFile, `<!DOCTYPE html><meta charset="utf-8"><title>floor</title><script>
let n = 0;
for (let i = 0; i < localStorage.length; i++) {
  const k = localStorage.key(i);
  if (!k.startsWith("cuvette.")) continue;
  const v = localStorage.getItem(k);
  try { JSON.parse(v); } catch (e) { JSON.parse(JSON.stringify(v)); }
  n += v.length;
}
document.title = "parsed " + n + " in " + performance.now().toFixed(1);
</script>`);

const profile = newProfile();
let { context, page } = await openApp(profile);
await page.evaluate((s) => { for (const [k, v] of Object.entries(s)) localStorage.setItem(k, v); }, store);
await page.evaluate(() => localStorage.setItem("cuvette.technician", "BM"));
page.setDefaultTimeout(600_000);
await page.reload();
await waitReady(page, 600_000); // copies the journal into IndexedDB once
await waitSaved(page, 600_000);
await context.close();

// The floor: the same stored characters read and parsed by a blank page.
({ context, page } = await openApp(profile, floorFile, { wait: false }));
await page.waitForFunction(() => document.title.startsWith("parsed"));
const floor = Number(/in ([\d.]+)/.exec(await page.title())[1]);
await context.close();

// Cold start: navigation to the Today board with its rows.
({ context, page } = await openApp(profile, undefined, { wait: false }));
page.setDefaultTimeout(600_000);
await waitReady(page, 600_000);
await byTestId(page, "today-test").first().waitFor();
const start = await page.evaluate(() => performance.now());
// What the app timed itself (left in globalThis.cuvetteTimings; see `timed` in src/ui).
const measured = (name) => page.evaluate((n) => globalThis.cuvetteTimings?.[n] ?? NaN, name);
const openJournal = await measured("cuvette:open-journal");
const judgeAll = await measured("cuvette:verdicts-all");

// Each figure is taken in the page: from the input event (a click, a typed value)
// to the first frame painted after what it changed is in the page, so Playwright's
// own checks before an action are not counted. `act` and `done` are page functions.
// `inPage` gives the painted time; `inPageBoth` also when the page first held the
// change (a DOM observer sees it), which a frame's wait (up to 16.7 ms) does not blur.
const inPageBoth = (act, done, arg) => page.evaluate(([act, done, arg]) => new Promise((resolve, reject) => {
  const actF = new Function("arg", act);
  const doneF = new Function("arg", done);
  let settled = false;
  const t0 = performance.now();
  const finish = () => {
    if (settled) return;
    settled = true;
    observer.disconnect();
    const dom = performance.now() - t0;
    requestAnimationFrame(() => resolve({ dom, painted: performance.now() - t0 }));
  };
  const observer = new MutationObserver(() => { if (doneF(arg)) finish(); });
  observer.observe(document.body, { subtree: true, childList: true, attributes: true, characterData: true });
  actF(arg);
  if (doneF(arg)) finish();
  setTimeout(() => { if (!settled) { observer.disconnect(); reject(new Error("not done: " + done)); } }, 600_000);
}), [act, done, arg]);
const inPage = async (act, done, arg) => (await inPageBoth(act, done, arg)).painted;
const views = {};
for (const v of ["runs", "charts", "calibration", "materials", "instrument", "records", "setup", "today"]) {
  views[v] = await inPage(
    `document.querySelector('[data-testid="nav-' + arg + '"]').click()`,
    `const el = document.querySelector('[data-testid="view-' + arg + '"]'); return el && !el.hidden`,
    v,
  );
}
// Chromium's sampling profiler over one action: the functions with the most self time.
const profiling = Boolean(process.env.CUVETTE_PROFILE);
const cdp = profiling ? await context.newCDPSession(page) : null;
if (cdp) {
  await cdp.send("Profiler.enable");
  await cdp.send("Profiler.setSamplingInterval", { interval: 100 });
}
const profiles = [];
const profiled = async (label, f) => {
  if (!cdp) return f();
  await cdp.send("Profiler.start");
  const r = await f();
  const { profile } = await cdp.send("Profiler.stop");
  profiles.push([label, profile]);
  return r;
};
const heaviest = (profile, n = 25) => {
  const self = new Map();
  const dt = new Map();
  profile.samples.forEach((id, k) => dt.set(id, (dt.get(id) || 0) + (profile.timeDeltas[k] || 0)));
  for (const node of profile.nodes) {
    const name = node.callFrame.functionName || `(${node.callFrame.url.split("/").pop() || "program"})`;
    self.set(name, (self.get(name) || 0) + (dt.get(node.id) || 0) / 1000);
  }
  const total = [...self.values()].reduce((a, b) => a + b, 0);
  return [...self.entries()].sort((a, b) => b[1] - a[1]).slice(0, n)
    .map(([f, t]) => `  ${t.toFixed(1).padStart(8)} ms ${(100 * t / total).toFixed(0).padStart(3)}%  ${f}`).join("\n");
};
await byTestId(page, "nav-runs").click();
const card = byTestId(page, "runs-T00");
await card.locator('[data-testid="new-run-T00"]').click();
const preview = await profiled("value typed", () => inPageBoth(
  `const el = document.querySelector('[data-testid="runs-T00"] [data-testid="run-value-0"]');
   el.value = "96.1"; el.dispatchEvent(new Event("input", { bubbles: true }));`,
  `return document.querySelector('[data-testid="runs-T00"] .run-preview') !== null`,
));
await card.locator('[data-testid="run-value-1"]').fill("262.0");
const rows = await card.locator('[data-testid="qc-run"]').count();
const save = await profiled("run saved", async () => {
  const t = await inPageBoth(
    `document.querySelector('[data-testid="runs-T00"] [data-testid="save-run"]').click()`,
    `return document.querySelectorAll('[data-testid="runs-T00"] [data-testid="qc-run"]').length > arg`,
    rows,
  );
  await waitSaved(page, 600_000);
  return t;
});
const judgeChange = await measured("cuvette:verdicts-after-change");
// The app's WebAssembly memory (the single file's boot script leaves it on globalThis).
const memory = await page.evaluate(() => globalThis.cuvetteWasmMemory?.buffer.byteLength ?? 0);
await context.close();

const ms = (x) => `${x.toFixed(0)} ms`;
console.log(`stored: ${Object.keys(store).length} keys, ${chars} characters`);
console.log(`cold start to the Today board: ${ms(start)}; floor page (read and parse the same characters): ${ms(floor)}; start/floor = ${(start / floor).toFixed(1)} (budget 2)`);
console.log(`of which: the journal opened (read, checked, replayed) ${ms(openJournal)}; every test's QC judged as wasm ${judgeAll.toFixed(1)} ms`);
console.log(`after the run saved, the QC verdicts brought up to date (its test judged again, the others kept): ${judgeChange.toFixed(2)} ms`);
console.log(`open a view (budget 100 ms): ${Object.entries(views).map(([v, t]) => `${v} ${ms(t)}`).join(", ")}`);
console.log(`first control value typed -> decision in the page ${preview.dom.toFixed(1)} ms, painted ${ms(preview.painted)} (budget 16 ms)`);
console.log(`QC run saved -> its row in the page ${ms(save.dom)}, painted ${ms(save.painted)} (budget 50 ms)`);
console.log(`WebAssembly memory after the session: ${(memory / 1048576).toFixed(1)} MiB; stored ${(chars / 1048576).toFixed(1)} M characters; memory/stored = ${(memory / chars).toFixed(1)} (budget 3)`);
for (const [label, profile] of profiles) console.log(`\nCPU profile, ${label} (self time):\n${heaviest(profile)}`);
