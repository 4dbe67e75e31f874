// Save time with three years of a 20-test, two-level daily lab stored, in headless
// Chromium against dist/cuvette.html. Run `cargo bench --bench records` first (it writes
// target/bench-records-store.json), then `node tests/e2e/bench-save.mjs`. Prints the
// start-up time and the time from "add" to "All saved" for a material, median of 9, and
// their ratio, all from one run. Not part of the test suite: timings are never asserted.
import { readFileSync } from "node:fs";
import { openApp, newProfile, byTestId, waitReady, waitSaved } from "./helpers.mjs";

const store = JSON.parse(readFileSync(new URL("../../target/bench-records-store.json", import.meta.url), "utf8"));
const profile = newProfile();
let { context, page } = await openApp(profile);
await page.evaluate((s) => { for (const [k, v] of Object.entries(s)) localStorage.setItem(k, v); }, store);
await page.evaluate(() => localStorage.setItem("cuvette.technician", "BM"));
page.setDefaultTimeout(600_000);
let t = Date.now();
await page.reload();
await waitReady(page, 600_000);
const firstStart = Date.now() - t; // includes copying the journal into IndexedDB
await context.close();
({ context, page } = await openApp(profile, undefined, { wait: false }));
page.setDefaultTimeout(600_000);
page.setDefaultTimeout(600_000);
t = Date.now();
await waitReady(page, 600_000);
const start = Date.now() - t;
await byTestId(page, "nav-materials").click();
await byTestId(page, "new-material").click();
const saves = [];
for (let k = 0; k < 9; k++) {
  await byTestId(page, "material-name").fill(`Bench reagent ${k}`);
  await byTestId(page, "material-expiry").fill("2030-12");
  await byTestId(page, "material-days").fill("7");
  const t0 = await page.evaluate(() => performance.now());
  await byTestId(page, "add-material").click();
  await waitSaved(page, 600_000);
  saves.push((await page.evaluate(() => performance.now())) - t0);
}
saves.sort((a, b) => a - b);
const save = saves[4];
console.log(`stored: ${Object.keys(store).length} keys, ${Object.entries(store).reduce((n, [k, v]) => n + k.length + v.length, 0)} characters`);
console.log(`first start (journal copied into IndexedDB): ${firstStart} ms; later start: ${start} ms`);
console.log(`save with three years stored, add -> All saved: median ${save.toFixed(0)} ms of 9 (min ${saves[0].toFixed(0)}, max ${saves[8].toFixed(0)}); start/save = ${(start / save).toFixed(1)}`);
await context.close();
