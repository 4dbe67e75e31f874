// Page helpers for the end-to-end tests: Debian's Chromium, headless, a fresh profile
// folder per test (reused across relaunches to prove persistence), dist/cuvette.html
// opened from file://.
import { chromium } from "playwright-core";
import { mkdtempSync, existsSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve, dirname } from "node:path";
import { fileURLToPath, pathToFileURL } from "node:url";

const here = dirname(fileURLToPath(import.meta.url));
export const singleFile = resolve(here, "../../dist/cuvette.html");
export const fileUrl = pathToFileURL(singleFile).href;

export function newProfile() {
  return mkdtempSync(join(tmpdir(), "cuvette-profile-"));
}

const FLAGS = [
  "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
  "--disable-background-networking", "--disable-component-update", "--disable-sync",
];

/** Launch Chromium on `profile`, open the single file (or `file`), wait for the app's
 *  <main>. `problems` collects console errors, page errors, failed requests and any
 *  request that is not file: or data: (the app must need no network). */
export async function openApp(profile, file = singleFile) {
  if (!existsSync(file)) {
    throw new Error(`${file} is missing: build it with trunk build --release first`);
  }
  const xdg = mkdtempSync(join(tmpdir(), "cuvette-xdg-"));
  const context = await chromium.launchPersistentContext(profile, {
    executablePath: process.env.CHROMIUM || "/usr/bin/chromium",
    headless: true,
    args: FLAGS,
    env: { ...process.env, XDG_CONFIG_HOME: xdg, XDG_CACHE_HOME: xdg },
  });
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
  await page.waitForSelector("main [data-testid=view-calibration]", { state: "attached", timeout: 20000 });
  return { context, page, problems };
}

export const byTestId = (page, id) => page.locator(`[data-testid="${id}"]`);
