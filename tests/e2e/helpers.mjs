// Page helpers for the end-to-end tests: Debian's Chromium, headless, a fresh profile
// folder per test (reused across relaunches to prove persistence), dist/cuvette.html
// opened from file://. Every page runs on a fixed clock in a fixed time zone, so a test
// gives the same answer at any hour and in any TZ the machine has.
import { after } from "node:test";
import { chromium } from "playwright-core";
import { mkdtempSync, existsSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve, dirname } from "node:path";
import { fileURLToPath, pathToFileURL } from "node:url";

const here = dirname(fileURLToPath(import.meta.url));
// CUVETTE_APP names another build of the single file (a benchmark on a build with names).
export const singleFile = process.env.CUVETTE_APP ? resolve(process.env.CUVETTE_APP) : resolve(here, "../../dist/cuvette.html");
export const fileUrl = pathToFileURL(singleFile).href;

// A test that fails before closing its browser must not keep the run waiting: every
// browser still open when a test file ends is closed.
const openContexts = new Set();
after(async () => {
  for (const c of openContexts) await c.close().catch(() => {});
});

export function newProfile() {
  return mkdtempSync(join(tmpdir(), "cuvette-profile-"));
}

const FLAGS = [
  "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
  "--disable-background-networking", "--disable-component-update", "--disable-sync",
];

/** The instant every test starts at unless it names its own: a weekday mid-morning in
 *  a zone three hours east of UTC. The page's clock starts there and then runs. */
export const DEFAULT_NOW = "2026-11-27T09:30:00Z";
export const DEFAULT_ZONE = "Africa/Nairobi";

/** Launch Chromium on `profile`, open the single file (or `file`), wait for the app's
 *  <main>. The page's clock starts at `now` (ISO 8601) in the IANA zone `zone`.
 *  `problems` collects console errors, page errors, failed requests and any request
 *  that is not file: or data: (the app must need no network). */
export async function openApp(profile, file = singleFile, { now = DEFAULT_NOW, zone = DEFAULT_ZONE, wait = true } = {}) {
  if (!existsSync(file)) {
    throw new Error(`${file} is missing: build it with trunk build --release first`);
  }
  const xdg = mkdtempSync(join(tmpdir(), "cuvette-xdg-"));
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
    headless: true,
    args: FLAGS,
    timezoneId: zone,
    env: { ...process.env, XDG_CONFIG_HOME: xdg, XDG_CACHE_HOME: xdg },
  });
  openContexts.add(context);
  context.on("close", () => openContexts.delete(context));
  await context.clock.install({ time: new Date(now) });
  const page = context.pages()[0] || (await context.newPage());
  const problems = [];
  page.on("console", (msg) => {
    if (msg.type() === "error") problems.push(`console error: ${msg.text()}`);
  });
  page.on("pageerror", (err) => problems.push(`page error: ${err.message}`));
  page.on("requestfailed", (req) => problems.push(`request failed: ${req.url()}`));
  page.on("request", (req) => {
    if (!/^(file|data):/.test(req.url())) problems.push(`network request: ${req.url()}`);
  });
  await page.goto(pathToFileURL(file).href);
  if (wait) await waitReady(page);
  return { context, page, problems };
}

/** Wait until the app has opened its stores and shows the lab. */
export async function waitReady(page, timeout = 20000) {
  await page.waitForSelector("main [data-testid=view-calibration]", { state: "attached", timeout });
  await page.waitForSelector('[data-testid=save-state]:not([data-state="opening"])', { timeout });
}

/** Wait until every change on screen is committed ("All saved"). */
export async function waitSaved(page, timeout = 20000) {
  await page.waitForSelector('[data-testid=save-state][data-state="saved"]', { timeout });
}

export const byTestId = (page, id) => page.locator(`[data-testid="${id}"]`);
