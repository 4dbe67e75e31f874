// Records to the USB stick and back, in the browser: the day's files (JSON, CSV) of the
// demo's last day, checked by the calculator's check-backup; an import preview with a
// conflict resolved, and the same file again changing nothing; a tampered file refused
// with its message; the printed day sheet (page.pdf, read back with pdftotext); extreme
// numbers typed into every numeric field of every form leave the page alive.
import { test } from "node:test";
import assert from "node:assert/strict";
import { execFileSync } from "node:child_process";
import { mkdtempSync, readFileSync, writeFileSync } from "node:fs";
import { tmpdir } from "node:os";
import { join, resolve, dirname } from "node:path";
import { fileURLToPath } from "node:url";
import { openApp, newProfile, byTestId, waitSaved } from "./helpers.mjs";

const here = dirname(fileURLToPath(import.meta.url));
const demoBackup = resolve(here, "../../demo-data/demo-backup.json");
const calc = resolve(here, "../../target/debug/cuvette-calc");

async function initials(page, who) {
  await byTestId(page, "initials").fill(who);
  await byTestId(page, "initials").press("Enter");
}

async function loadDemo(page) {
  await byTestId(page, "nav-setup").click();
  await byTestId(page, "load-demo").click();
  await byTestId(page, "demo-banner").waitFor();
  await waitSaved(page);
}

/** Click `button` and collect `n` downloads, saved into a fresh folder: [{name, text}]. */
async function downloads(page, button, n) {
  const dir = mkdtempSync(join(tmpdir(), "usb-"));
  const got = [];
  const all = new Promise((ok) => {
    page.on("download", async (d) => {
      const path = join(dir, d.suggestedFilename());
      await d.saveAs(path);
      got.push({ name: d.suggestedFilename(), path, text: readFileSync(path, "utf8") });
      if (got.length === n) ok();
    });
  });
  await button.click();
  await all;
  page.removeAllListeners("download");
  return got;
}

/** Import `path` and wait for the preview (or the refusal). */
async function importFile(page, path) {
  await byTestId(page, "nav-records").click();
  await byTestId(page, "import-json").setInputFiles(path);
  await page.waitForSelector('[data-testid="import-preview"], [data-testid="import-refused"]');
}

test("the day's records of the demo's last day: one JSON that checks, and a CSV per kind of record", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await initials(page, "dx");
    await loadDemo(page);
    // Two patient samples worked out and recorded (held: the demo's glucose QC is
    // rejected today).
    await byTestId(page, "nav-runs").click();
    const glu = byTestId(page, "runs-GLU");
    await glu.locator('[data-testid="samples-GLU"]').click();
    await glu.locator('[data-testid="samples-blank"]').fill("0.012");
    await glu.locator('[data-testid="samples-lines"]').fill("S-101 0.412\nS-102 0.250");
    await glu.locator('[data-testid="record-samples"]').click();
    await glu.locator('[data-testid="recorded-results"]').waitFor();
    assert.match(await glu.locator('[data-testid="recorded-results"]').innerText(), /Patient results recorded today: 2 — S-101 \(held\), S-102 \(held\)/);
    await waitSaved(page);
    await byTestId(page, "nav-records").click();
    // Today (the fixed clock's 2026-11-27 in Nairobi) is the demo's last day.
    assert.equal(await byTestId(page, "export-day").inputValue(), "2026-11-27");
    const [json] = await downloads(page, byTestId(page, "export-day-json"), 1);
    assert.equal(json.name, "cuvette-ndovu-hill-hospital-lab-demo-invented-day-2026-11-27.json");
    const file = JSON.parse(json.text);
    assert.equal(file.format, "cuvette-records");
    assert.equal(file.scope, "day");
    assert.equal(file.day, "2026-11-27");
    // Outside the app, the calculator checks it.
    const summary = JSON.parse(execFileSync(calc, ["check-backup"], { input: json.text }).toString());
    assert.match(summary.chain, /^intact/);
    assert.ok(summary.records["QC run"] >= 3, JSON.stringify(summary));
    const csvs = await downloads(page, byTestId(page, "export-day-csv"), 7);
    const byName = Object.fromEntries(csvs.map((c) => [c.name.replace(/^cuvette-ndovu-hill-hospital-lab-demo-invented-|-2026-11-27\.csv$/g, ""), c.text]));
    assert.deepEqual(Object.keys(byName).sort(), ["calibrations", "corrective-actions", "instrument-log", "materials", "patient-results", "qc-results", "trail"]);
    const qc = byName["qc-results"].trim().split("\r\n");
    assert.equal(qc[0], "test,level,lot,run_at,value,unit,target_mean,target_sd,z,decision,rules_broken,after_corrective_action,acknowledged_warnings,by,record_id");
    assert.ok(qc.length > 1);
    assert.ok(qc.slice(1).every((l) => /,2026-11-27T\d\d:\d\d:\d\d\+03:00,/.test(l) && /,(accept|warning|reject),/.test(l)), qc.join("\n"));
    assert.ok(qc.some((l) => /^GLU,.*,reject,/.test(l)), `the demo's glucose rejection is in the day's QC:\n${qc.join("\n")}`);
    const patients = byName["patient-results"].trim().split("\r\n");
    assert.equal(patients[0], "test,sample,at,signal,result,unit,flag,disposition,held,by,calibration_id,record_id");
    assert.equal(patients.length, 3);
    assert.ok(patients.slice(1).every((l) => /^GLU,S-10[12],2026-11-27T.*,held,DX,/.test(l)), patients.join("\n"));
    const trail = byName.trail.trim().split("\r\n");
    assert.match(trail[0], /^at,by,action,record,version,reason,summary,record_id,sha256$/);
    assert.ok(trail.slice(1).every((l) => l.startsWith("2026-11-27T")));
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("an import shows a preview; a record changed on both PCs is resolved by choice, both versions kept; the same file again changes nothing", async () => {
  const a = await openApp(newProfile());
  const b = await openApp(newProfile());
  try {
    for (const [p, who] of [[a.page, "aa"], [b.page, "bb"]]) {
      await initials(p, who);
      await importFile(p, demoBackup);
      assert.match(await byTestId(p, "import-counts").innerText(), /^\d+ record\(s\) to add, 0 to update, 0 already here, 0 conflict\(s\)\.$/);
      await byTestId(p, "import-confirm").click();
      await waitSaved(p);
      assert.match(await byTestId(p, "records-outcome").innerText(), /Imported demo-backup\.json: \d+ record\(s\) added/);
    }
    const correct = async (p, mean, why) => {
      await byTestId(p, "nav-setup").click();
      const level = byTestId(p, "setup-level").first();
      await level.locator('[data-testid="correct-level"]').click();
      await level.locator('[data-testid="correct-level-mean"]').fill(mean);
      await level.locator('[data-testid="correction-reason"]').fill(why);
      await level.locator('[data-testid="save-correction"]').click();
      await waitSaved(p);
    };
    await correct(a.page, "96.5", "new insert on PC A");
    await correct(b.page, "97", "new insert on PC B");
    await byTestId(a.page, "nav-records").click();
    const [fromA] = await downloads(a.page, byTestId(a.page, "export-backup"), 1);
    assert.match(fromA.name, /^cuvette-demo-district-hospital-lab-invented-data-backup-2026-11-27\.json$/);

    await importFile(b.page, fromA.path);
    // A's own import event is a record B lacks; the level is the conflict.
    assert.match(await byTestId(b.page, "import-counts").innerText(), /1 record\(s\) to add, 0 to update, \d+ already here, 1 conflict\(s\)/);
    const conflict = byTestId(b.page, "import-conflict");
    assert.match(await conflict.innerText(), /changed on both PCs.*this PC: .*mean 97.* by BB.*the file: .*mean 96\.5.* by AA/s);
    assert.equal(await byTestId(b.page, "import-confirm").isDisabled(), true, "a conflict must be decided first");
    await conflict.locator('[data-testid="keep-theirs"]').check();
    await byTestId(b.page, "import-confirm").click();
    await waitSaved(b.page);
    await byTestId(b.page, "nav-setup").click();
    await b.page.waitForFunction(() => /96\.5 ±/.test(document.querySelector('[data-testid="setup-level"]').textContent));
    await byTestId(b.page, "setup-level").first().locator('[data-testid="show-history"]').click();
    const versions = await byTestId(b.page, "history-version").allInnerTexts();
    assert.equal(versions.length, 3);
    assert.match(versions[1], /BB corrected .*new insert on PC B.*mean 97/s);
    assert.match(versions[2], /AA corrected .*new insert on PC A.*mean 96\.5/s);
    await byTestId(b.page, "close-history").click();

    // The same file again: nothing to import.
    const before = await b.page.evaluate(() => Object.keys(localStorage).length);
    await importFile(b.page, fromA.path);
    assert.match(await byTestId(b.page, "import-counts").innerText(), /0 record\(s\) to add, 0 to update, \d+ already here, 0 conflict\(s\)/);
    await byTestId(b.page, "import-confirm").click();
    assert.match(await byTestId(b.page, "records-outcome").innerText(), /already here; nothing changed/);
    assert.equal(await b.page.evaluate(() => Object.keys(localStorage).length), before);
    assert.deepEqual(a.problems, []);
    assert.deepEqual(b.problems, []);
  } finally {
    await a.context.close();
    await b.context.close();
  }
});

test("a records file dropped onto the import area gives the same preview as the file picker", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-records").click();
    const text = readFileSync(demoBackup, "utf8");
    // What the browser hands over when a file is dragged from the USB stick's folder.
    await byTestId(page, "import-drop").evaluate((zone, t) => {
      const data = new DataTransfer();
      data.items.add(new File([t], "from-the-stick.json", { type: "application/json" }));
      zone.dispatchEvent(new DragEvent("dragover", { dataTransfer: data, bubbles: true, cancelable: true }));
      zone.dispatchEvent(new DragEvent("drop", { dataTransfer: data, bubbles: true, cancelable: true }));
    }, text);
    await byTestId(page, "import-preview").waitFor();
    assert.match(await byTestId(page, "import-preview").innerText(), /^from-the-stick\.json: a full backup of Demo district hospital lab/);
    assert.match(await byTestId(page, "import-counts").innerText(), /^\d+ record\(s\) to add, 0 to update, 0 already here, 0 conflict\(s\)\.$/);
    await byTestId(page, "import-cancel").click();
    assert.equal(await byTestId(page, "import-preview").count(), 0);
    assert.equal(await byTestId(page, "records-summary").innerText(), "No records yet.");
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a tampered file and another program's JSON are refused with a message naming the place; nothing changes", async () => {
  const dir = mkdtempSync(join(tmpdir(), "usb-"));
  const { context, page, problems } = await openApp(newProfile());
  try {
    await initials(page, "tf");
    await importFile(page, demoBackup);
    await byTestId(page, "import-confirm").click();
    await waitSaved(page);
    const summary = await byTestId(page, "records-summary").innerText();
    const text = readFileSync(demoBackup, "utf8");
    const tampered = join(dir, "tampered.json");
    writeFileSync(tampered, text.replace(/"mean":95\.0/, '"mean":120.0'));
    await importFile(page, tampered);
    assert.match(await byTestId(page, "import-refused").innerText(), /^tampered\.json: entry \d+ \(control level [0-9a-f]{8}\): its content does not match its SHA-256.*Nothing was imported/);
    const other = join(dir, "package.json");
    writeFileSync(other, JSON.stringify({ schema_version: 1, lab_name: "x", name: "some-app" }));
    await importFile(page, other);
    assert.match(await byTestId(page, "import-refused").innerText(), /package\.json: this is not a Cuvette records file: it lacks tests, control_levels, control_runs; it holds fields Cuvette does not write \(name\)\. Nothing was imported\./);
    const junk = join(dir, "photo.json");
    writeFileSync(junk, Buffer.from([0xff, 0xd8, 0xff, 0xe0, 0x00, 0x10]));
    await importFile(page, junk);
    assert.match(await byTestId(page, "import-refused").innerText(), /photo\.json: this is not a Cuvette records file: it is not JSON/);
    assert.equal(await byTestId(page, "records-summary").innerText(), summary);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("the printed day sheet: one page per section with the lab, the date, who worked and a signature line", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await initials(page, "ps");
    await loadDemo(page);
    await byTestId(page, "nav-records").click();
    await byTestId(page, "print-day-sheet").click();
    await byTestId(page, "day-sheet").waitFor();
    assert.equal(await byTestId(page, "sheet-part").count(), 7);
    const pdf = join(mkdtempSync(join(tmpdir(), "sheet-")), "day.pdf");
    await page.pdf({ path: pdf, format: "A4" });
    const pages = Number(/Pages:\s+(\d+)/.exec(execFileSync("pdfinfo", [pdf]).toString())[1]);
    assert.ok(pages >= 7, `${pages} pages`);
    const text = execFileSync("pdftotext", ["-layout", pdf, "-"]).toString();
    for (const want of ["Ndovu Hill Hospital lab", "DEMO LAB", "2026-11-27", "QC results", "Corrective actions", "Calibrations", "Patient results", "Materials received, opened or discarded", "Instrument log", "Trail"]) {
      assert.ok(text.includes(want), `the sheet lacks ${want}`);
    }
    assert.match(text, /Who worked: [A-Z]{2}/);
    assert.equal(text.match(/Reviewed by \(name, signature\)/g).length, 7);
    // Only the sheet is printed: not the bench around it.
    assert.ok(!text.includes("Technician"), "the page header was printed");
    assert.ok(!text.includes("Carry the records to another PC"));
    await byTestId(page, "sheet-close").click();
    assert.equal(await byTestId(page, "day-sheet").count(), 0);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("extreme numbers typed into every numeric field of every form: the page stays alive and the lab loads afterwards", async () => {
  const profile = newProfile();
  let { context, page, problems } = await openApp(profile);
  const saves = ["record-samples", "save-run", "save-calibration", "add-material", "add-instrument-entry", "add-level", "add-test", "save-correction"];
  let filled = 0;
  let clicked = 0;
  try {
    await initials(page, "xn");
    await loadDemo(page);
    for (const value of ["1e308", "100000000", "-1e308", "0", "1e-320", "18446744073709551616"]) {
      for (const view of ["setup", "materials", "instrument", "runs", "calibration"]) {
        await byTestId(page, `nav-${view}`).click();
        const panel = byTestId(page, `view-${view}`);
        // Open every form of the view.
        await panel.evaluate((el) => el.querySelectorAll("details").forEach((d) => { d.open = true; }));
        for (const id of ["correct-level", "correct-test"]) {
          const b = panel.locator(`[data-testid="${id}"]`).first();
          if (await b.count()) await b.click();
        }
        for (const f of await panel.locator('input:not([type=file]):not([type=date]):not([type=month]):not([type=radio]):not([type=checkbox]):not([data-testid=lab-name-input]), textarea').all()) {
          if (!(await f.isVisible())) continue;
          const multi = await f.evaluate((e) => e.tagName === "TEXTAREA");
          await f.fill(multi ? `${value} ${value} ${value}\n${value} ${value}` : value);
          filled++;
        }
        for (const id of saves) {
          for (const b of await panel.locator(`[data-testid="${id}"]`).all()) {
            if (await b.isVisible() && await b.isEnabled()) {
              await b.click();
              clicked++;
            }
          }
        }
        assert.equal(await page.evaluate(() => 1 + 1), 2, `the page answers after ${value} in ${view}`);
      }
    }
    // Every form was reached: set-up (test, level, two corrections), material,
    // instrument, a run and samples per test, a calibration per test.
    assert.ok(filled >= 6 * 25 && clicked >= 6 * 9, `${filled} fields filled, ${clicked} saves tried`);
    await waitSaved(page).catch(() => {});
    assert.deepEqual(problems, []);
    await context.close();
    ({ context, page, problems } = await openApp(profile));
    await waitSaved(page);
    assert.equal(await byTestId(page, "recovery").count(), 0);
    assert.match(await byTestId(page, "lab-name").innerText(), /Ndovu Hill Hospital lab/);
    await byTestId(page, "nav-materials").click();
    assert.ok(await byTestId(page, "material-row").count() >= 4);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a year is archived: written, its copy checked, then removed; the archive reopens read-only with its records", async () => {
  // March 2027: the demo backup's records (November 2026) belong to a year that is over.
  const { context, page, problems } = await openApp(newProfile(), undefined, { now: "2027-03-01T08:00:00Z" });
  try {
    await initials(page, "ar");
    await importFile(page, demoBackup);
    await byTestId(page, "import-confirm").click();
    await waitSaved(page);
    const runsBefore = await byTestId(page, "records-summary").innerText();
    assert.match(runsBefore, /78 QC runs/);
    assert.equal(await byTestId(page, "archive-year").inputValue(), "2026");
    assert.match(await byTestId(page, "archive-count").innerText(), /^\d{2,} record\(s\) can be archived$/);
    const [file] = await downloads(page, byTestId(page, "archive-write"), 1);
    assert.match(file.name, /^cuvette-demo-district-hospital-lab-invented-data-archive-2026-2027-03-01\.json$/);
    // Nothing is removed before the copy is checked; a different file is refused.
    assert.equal(await byTestId(page, "archive-remove").isDisabled(), true);
    await byTestId(page, "archive-verify").setInputFiles(demoBackup);
    // The copy is read asynchronously: wait for its verdict.
    await page.waitForFunction(() => /not the archive just written.*Nothing was removed/.test(document.querySelector('[data-testid="archive-message"]').textContent));
    assert.equal(await byTestId(page, "archive-remove").isDisabled(), true);
    await byTestId(page, "archive-verify").setInputFiles(file.path);
    await page.waitForFunction(() => /complete, intact copy/.test(document.querySelector('[data-testid="archive-message"]').textContent));
    await byTestId(page, "archive-remove").click();
    await page.waitForFunction(() => /were removed from this browser/.test(document.querySelector('[data-testid="archive-message"]').textContent));
    await page.waitForFunction(() => /3 tests, 6 control levels, 0 QC runs/.test(document.querySelector('[data-testid="records-summary"]').textContent));
    // The trail of today says so; a reload keeps it that way.
    assert.match(await byTestId(page, "day-trail").innerText(), /AR made records event .*archived 2026: \d+ record\(s\)/s);
    await page.reload();
    await waitSaved(page);
    await byTestId(page, "nav-records").click();
    assert.match(await byTestId(page, "records-summary").innerText(), /0 QC runs/);
    // The archive opens read-only: its runs and charts are there, nothing can be changed.
    await importFile(page, file.path);
    await byTestId(page, "open-read-only").click();
    assert.match(await byTestId(page, "archive-banner").innerText(), /READ-ONLY: .*archive-2026/);
    await page.waitForFunction(() => /78 QC runs/.test(document.querySelector('[data-testid="records-summary"]').textContent));
    await byTestId(page, "nav-charts").click();
    // The charts show a month (this one, March 2027, by the clock): the archive's is November.
    await byTestId(page, "charts-period").fill("2026-11");
    await byTestId(page, "charts-period").dispatchEvent("change");
    await byTestId(page, "lj-chart").first().waitFor();
    await byTestId(page, "nav-materials").click();
    if (!(await byTestId(page, "material-name").isVisible())) await byTestId(page, "new-material").click();
    await byTestId(page, "material-name").fill("A reagent typed into the archive");
    await byTestId(page, "material-expiry").fill("2030-12");
    await byTestId(page, "material-days").fill("7");
    await byTestId(page, "add-material").click();
    assert.match(await byTestId(page, "problem").innerText(), /open read-only: nothing in it can be changed/);
    await byTestId(page, "close-archive").click();
    await byTestId(page, "nav-records").click();
    await page.waitForFunction(() => /0 QC runs/.test(document.querySelector('[data-testid="records-summary"]').textContent));
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
