// The delivery chain: the single file opens from file://, renders the app, keeps what
// it saves across a reload and a browser restart, and logs no errors.
import { test } from "node:test";
import assert from "node:assert/strict";
import { copyFileSync, mkdtempSync, readFileSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join } from "node:path";
import { openApp, newProfile, byTestId, singleFile, waitReady, waitSaved } from "./helpers.mjs";

test("the single file renders the app shell from file://", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    assert.ok(page.url().startsWith("file://"), page.url());
    const views = await page.locator("main > section.view").evaluateAll((els) =>
      els.map((e) => e.dataset.testid));
    for (const v of ["today", "calibration", "runs", "charts", "materials", "instrument", "records", "setup"]) {
      assert.ok(views.includes(`view-${v}`), `view ${v} missing from <main>: ${views}`);
    }
    // Navigation shows one view at a time.
    await byTestId(page, "nav-calibration").click();
    assert.equal(await byTestId(page, "view-calibration").isVisible(), true);
    assert.equal(await byTestId(page, "view-today").isVisible(), false);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("saved values survive a reload and a browser restart", async () => {
  const profile = newProfile();
  let { context, page, problems } = await openApp(profile);
  await byTestId(page, "initials").fill("ab");
  await byTestId(page, "initials").press("Enter");
  await byTestId(page, "nav-materials").click();
  const keys = await page.evaluate(() => Object.keys(localStorage));
  assert.ok(keys.length > 0 && keys.every((k) => k.startsWith("cuvette.")), `keys: ${keys}`);
  await waitSaved(page);
  await page.reload();
  await waitReady(page);
  assert.equal(await byTestId(page, "initials").inputValue(), "AB");
  assert.equal(await byTestId(page, "view-materials").isVisible(), true);
  assert.deepEqual(problems, []);
  await context.close();

  ({ context, page, problems } = await openApp(profile));
  try {
    assert.equal(await byTestId(page, "initials").inputValue(), "AB", "initials lost on restart");
    assert.equal(await byTestId(page, "view-materials").isVisible(), true);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("the demo lab loads from the embedded file and draws control charts", async () => {
  const profile = newProfile();
  let { context, page, problems } = await openApp(profile);
  await byTestId(page, "nav-setup").click();
  await byTestId(page, "load-demo").click();
  await byTestId(page, "demo-banner").waitFor();
  assert.match(await byTestId(page, "lab-name").innerText(), /demo/i);
  await byTestId(page, "nav-charts").click();
  const charts = byTestId(page, "lj-chart");
  await charts.first().waitFor();
  assert.ok((await charts.count()) >= 2, "one chart per control level");
  // The canvas really has ink on it: count non-white pixels.
  const inked = await charts.first().evaluate((c) => {
    const d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
    let n = 0;
    for (let i = 0; i < d.length; i += 4) if (d[i] < 200 || d[i + 1] < 200 || d[i + 2] < 200) n++;
    return n;
  });
  assert.ok(inked > 500, `only ${inked} inked pixels`);
  // Each point explains itself: with the keyboard (focus, End = the newest run: this
  // morning's glucose 4-1s rejection), and under the pointer.
  const note = byTestId(page, "lj-point-note").first();
  await charts.first().focus();
  await page.keyboard.press("End");
  assert.match(await note.innerText(), /^\d{4}-\d\d-\d\d \d\d:\d\d: [\d.]+ mg\/dL, z [+-]\d\.\d\d — run reject: .*4-1s \(reject, /);
  await page.keyboard.press("ArrowLeft");
  assert.doesNotMatch(await note.innerText(), /4-1s \(reject, within/);
  const box = await charts.first().boundingBox();
  await page.mouse.move(box.x + box.width * 0.5, box.y + box.height * 0.5);
  assert.match(await note.innerText(), /^\d{4}-\d\d-\d\d \d\d:\d\d: [\d.]+ mg\/dL, z [+-]\d\.\d\d — run (accept|warning|reject)/);
  // The warned and rejected points are listed in words beneath the chart.
  assert.match(await byTestId(page, "lj-flagged").first().innerText(), /4-1s \(reject, .*4 consecutive results beyond the same 1 SD limit/);
  // This month's runs, named by their dates on the axis; the month before has its own;
  // four months back, before the demo's history, has none.
  const caption = () => byTestId(page, "view-charts").locator("figure.chart figcaption").first().innerText();
  assert.match(await caption(), /^GLU .* — 2026-11$/);
  await byTestId(page, "charts-period-previous").click();
  await page.waitForFunction(() => / — 2026-10$/.test(document.querySelector("figure.chart figcaption")?.innerText ?? ""));
  for (let k = 0; k < 3; k++) await byTestId(page, "charts-period-previous").click();
  await page.waitForFunction(() => document.querySelectorAll('[data-testid="lj-chart"]').length === 0);
  assert.match(await byTestId(page, "view-charts").innerText(), /No control results to chart in this period/);
  await byTestId(page, "charts-period-this").click();
  await charts.first().waitFor();
  // Statistics beside each chart: November has 28 glucose runs and the history 92; the
  // rejected ones (2) do not count, and 20 accepted results make the lab's own target
  // available.
  const stats = await byTestId(page, "level-stats").first().innerText();
  assert.match(stats, /This month \(2026-11\)\s+n 26,.*All accepted\s+n 90,/s);
  assert.match(stats, /lab's own target is available/);
  assert.deepEqual(problems, []);
  await waitSaved(page);
  await context.close();
  // The demo lab is still there after a restart.
  ({ context, page, problems } = await openApp(profile));
  try {
    await byTestId(page, "demo-banner").waitFor();
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("QC runs show the engine's decision for every run of the demo lab", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "nav-runs").click();
    const runs = byTestId(page, "qc-run");
    await runs.first().waitFor();
    // This month's runs of the 10 demo tests: 27 days each, and 3 re-runs.
    assert.equal(await runs.count(), 273);
    const decisions = await byTestId(page, "qc-decision").allInnerTexts();
    assert.ok(decisions.every((d) => /^(accept|warning|reject)/.test(d)), decisions.join("|"));
    assert.ok(decisions.some((d) => d.startsWith("reject")), "the demo's shift should be rejected");
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a copy of the single file elsewhere (a USB stick) works on its own", async () => {
  const stick = mkdtempSync(join(tmpdir(), "usb-stick-"));
  const copy = join(stick, "Cuvette lab bench.html");
  copyFileSync(singleFile, copy);
  const { context, page, problems } = await openApp(newProfile(), copy);
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "nav-charts").click();
    await byTestId(page, "lj-chart").first().waitFor();
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("records backed up on one PC import on another, and a bad file loses nothing", async () => {
  const dir = mkdtempSync(join(tmpdir(), "usb-"));
  const saved = join(dir, "records.json");
  let { context, page, problems } = await openApp(newProfile());
  await byTestId(page, "nav-setup").click();
  await byTestId(page, "load-demo").click();
  await byTestId(page, "demo-banner").waitFor();
  await byTestId(page, "nav-records").click();
  const summary = await byTestId(page, "records-summary").innerText();
  const [download] = await Promise.all([
    page.waitForEvent("download"),
    byTestId(page, "export-backup").click(),
  ]);
  assert.match(download.suggestedFilename(), /^cuvette-ndovu-hill-hospital-lab-demo-invented-backup-\d{4}-\d{2}-\d{2}\.json$/);
  await download.saveAs(saved);
  assert.deepEqual(problems, []);
  await context.close();

  // Another PC: a fresh profile.
  ({ context, page, problems } = await openApp(newProfile()));
  try {
    await byTestId(page, "initials").fill("im");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-records").click();
    await byTestId(page, "import-json").setInputFiles(saved);
    await byTestId(page, "import-preview").waitFor();
    // Nothing changes before the import is confirmed.
    assert.equal(await byTestId(page, "records-summary").innerText(), "No records yet.");
    await byTestId(page, "import-confirm").click();
    await byTestId(page, "records-outcome").waitFor();
    assert.match(await byTestId(page, "records-outcome").innerText(), /Imported records\.json: \d+ record\(s\) added, 0 updated/);
    assert.equal(await byTestId(page, "records-summary").innerText(), summary);
    // A file that is not a records file: a clear message, the records stay.
    const junk = join(dir, "photo.json");
    writeFileSync(junk, "this is not JSON");
    await byTestId(page, "import-json").setInputFiles(junk);
    await byTestId(page, "import-refused").waitFor();
    assert.match(await byTestId(page, "import-refused").innerText(), /photo\.json: this is not a Cuvette records file.*Nothing was imported/);
    assert.equal(await byTestId(page, "records-summary").innerText(), summary);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("today's board: each test's calibration and QC state, and materials to act on", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "nav-today").click();
    const rows = byTestId(page, "today-test");
    assert.equal(await rows.count(), 10);
    // The demo's glucose history ends in a shift that the multirule procedure rejects,
    // and the demo is moved so that this run was this morning.
    assert.match(await rows.first().innerText(), /GLU.*reject: hold patient results/s);
    const materials = await byTestId(page, "today-materials").innerText();
    assert.match(materials, /frozen aliquot/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("QC results and calibrations export as CSV for a spreadsheet", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "nav-records").click();
    const [download] = await Promise.all([
      page.waitForEvent("download"),
      byTestId(page, "export-qc-csv").click(),
    ]);
    assert.match(download.suggestedFilename(), /^cuvette-ndovu-hill-hospital-lab-demo-invented-qc-results-\d{4}-\d{2}-\d{2}\.csv$/);
    const path = join(mkdtempSync(join(tmpdir(), "csv-")), "qc.csv");
    await download.saveAs(path);
    const lines = readFileSync(path, "utf8").trim().split("\r\n");
    assert.equal(lines[0], "test,level,lot,run_at,value,unit,target_mean,target_sd,z,decision,rules_broken,after_corrective_action,acknowledged_warnings,by,record_id");
    // 10 demo tests × 91 days × 2 levels, 4 re-runs, a third cholesterol
    // level (the new lot, 8 days), one creatinine level not run once.
    assert.equal(lines.length - 1, 1835);
    assert.ok(lines.slice(1).every((l) => /,(accept|warning|reject),/.test(l)));
    // The demo's re-runs name the corrective action they follow.
    assert.ok(lines.filter((l) => /,[0-9a-f-]{36},,[A-Z]{2},[0-9a-f-]{36}$/.test(l)).length >= 4);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
