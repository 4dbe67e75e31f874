// Import time of a three-year backup in headless Chromium against dist/cuvette.html.
// Run `cargo bench --bench records` first (it writes target/bench-backup-3-years.json),
// then `node tests/e2e/bench-import.mjs`. Prints the time from picking the file to the
// preview (read, every check, the plan) and from "Import" to "All saved" (journal
// commit and drawing every view), from one run. Not part of the test suite.
import { fileURLToPath } from "node:url";
import { openApp, newProfile, byTestId, waitSaved } from "./helpers.mjs";

const file = fileURLToPath(new URL("../../target/bench-backup-3-years.json", import.meta.url));
const { context, page } = await openApp(newProfile());
page.setDefaultTimeout(1_200_000);
await byTestId(page, "initials").fill("bm");
await byTestId(page, "initials").press("Enter");
await byTestId(page, "nav-records").click();
let t = Date.now();
await byTestId(page, "import-json").setInputFiles(file);
await byTestId(page, "import-preview").waitFor();
const preview = Date.now() - t;
console.log(`file picked -> preview (read, checks, plan): ${preview} ms`);
t = Date.now();
await byTestId(page, "import-confirm").click();
await waitSaved(page, 1_200_000);
const saved = Date.now() - t;
console.log(`import -> all saved (commit, every view drawn): ${saved} ms; saved/preview = ${(saved / preview).toFixed(1)}`);
await context.close();
