// The bench with three years stored (the 20-test, two-level daily lab of
// `cargo bench --bench records`, which writes target/bench-records-store.json), in
// headless Chromium against dist/cuvette.html. Prints, from one run: the cold start to
// an interactive Today board against a floor page that only reads and JSON-parses the
// same stored characters (written beside the store, target/bench-floor.html), as a
// ratio; the time to open each view; a first control value typed → its decision shown;
// a QC run saved → its row shown; and the WebAssembly memory against the stored size.
// Not part of the test suite: timings are never asserted. Invented data for measuring.
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

const timed = async (act, done) => {
  const t0 = await page.evaluate(() => performance.now());
  await act();
  await done();
  return (await page.evaluate(() => performance.now())) - t0;
};
// What the measuring itself costs: a no-op through the same round trips.
const harness = await timed(() => page.evaluate(() => 0), () => page.waitForSelector("body"));
const views = {};
for (const v of ["runs", "charts", "calibration", "materials", "instrument", "records", "setup", "today"]) {
  views[v] = await timed(
    () => byTestId(page, `nav-${v}`).click(),
    () => page.waitForSelector(`[data-testid=view-${v}]:not([hidden])`),
  );
}
await byTestId(page, "nav-runs").click();
const card = byTestId(page, "runs-T00");
await card.locator('[data-testid="new-run-T00"]').click();
const preview = await timed(
  () => card.locator('[data-testid="run-value-0"]').fill("96.1"),
  () => card.locator(".run-preview").waitFor(),
);
await card.locator('[data-testid="run-value-1"]').fill("262.0");
const rows = await card.locator('[data-testid="qc-run"]').count();
const save = await timed(
  () => card.locator('[data-testid="save-run"]').click(),
  () => page.waitForFunction((n) => document.querySelectorAll('[data-testid="runs-T00"] [data-testid="qc-run"]').length > n, rows),
);
await waitSaved(page, 600_000);
// The app's WebAssembly memory (the single file's boot script leaves it on globalThis).
const memory = await page.evaluate(() => globalThis.cuvetteWasmMemory?.buffer.byteLength ?? 0);
await context.close();

const ms = (x) => `${x.toFixed(0)} ms`;
console.log(`stored: ${Object.keys(store).length} keys, ${chars} characters`);
console.log(`cold start to the Today board: ${ms(start)}; floor page (read and parse the same characters): ${ms(floor)}; start/floor = ${(start / floor).toFixed(1)} (budget 2)`);
console.log(`the measuring's own round trips (included in every figure below): ${ms(harness)}`);
console.log(`open a view (budget 100 ms): ${Object.entries(views).map(([v, t]) => `${v} ${ms(t)}`).join(", ")}`);
console.log(`first control value typed -> decision shown: ${ms(preview)} (budget 16 ms)`);
console.log(`QC run saved -> its row shown: ${ms(save)} (budget 50 ms)`);
console.log(`WebAssembly memory after the session: ${(memory / 1048576).toFixed(1)} MiB; stored ${(chars / 1048576).toFixed(1)} M characters; memory/stored = ${(memory / chars).toFixed(1)} (budget 3)`);
