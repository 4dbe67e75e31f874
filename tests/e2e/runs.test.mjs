// A new QC run: the decision is shown before saving, from the engine with the test's
// history; saved with the technician's initials; a rejected run says to hold results
// and asks for a corrective action before its re-run.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitSaved } from "./helpers.mjs";

test("a rejected run asks for a corrective action before its re-run, which is judged before it is saved", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("qa");
    await byTestId(page, "initials").press("Enter");
    // The board leads to the one rejection without an action: glucose, this morning, 4-1s.
    await byTestId(page, "nav-today").click();
    const waiting = byTestId(page, "awaiting-action");
    assert.equal(await waiting.count(), 1);
    assert.match(await waiting.innerText(), /^GLU — run of 2026-11-27 \d\d:\d\d rejected \(4-1s\)/);
    await waiting.click();
    await byTestId(page, "view-runs").waitFor();
    const card = byTestId(page, "runs-GLU");
    const before = await card.locator('[data-testid="qc-run"]').count();
    const newestRow = () => byTestId(page, "runs-GLU").locator('[data-testid="qc-run"]').first();
    // The glucose 2-2s episode of the demo has its actions, and each re-run names one.
    assert.ok((await card.locator('[data-testid="action-taken"]').count()) >= 1);
    assert.ok((await card.locator('[data-testid="rerun-after"]').count()) >= 1);
    assert.equal(await newestRow().locator('[data-testid="action-open"]').count(), 1);
    await card.locator('[data-testid="new-run-GLU"]').click();
    assert.match(await card.locator('[data-testid="rerun-blocked"]').innerText(), /^Not yet: the test's last run was rejected/);
    // Normal level target 95 ± 2.8 mg/dL (demo): 105 is +3.6 SD → 1-3s.
    await card.locator('[data-testid="run-value-0"]').fill("105");
    await card.locator('[data-testid="run-value-1"]').fill("265,0");
    const preview = card.locator(".run-preview");
    await preview.waitFor();
    assert.match(await preview.innerText(), /^reject: hold patient results/);
    assert.match(await preview.innerText(), /1-3s \(reject, within the run\).*Normal; run this run/);
    await card.locator('[data-testid="run-value-0"]').fill("abc");
    assert.match(await card.innerText(), /Normal: "abc" is not a number/);
    await card.locator('[data-testid="run-value-0"]').fill("105");
    // Refused: nothing recorded about the rejection yet; nothing typed is lost.
    await card.locator('[data-testid="save-run"]').click();
    assert.match(await card.locator('[data-testid="run-message"]').innerText(), /record what was found and what was done/);
    assert.equal(await card.locator('[data-testid="qc-run"]').count(), before);
    assert.equal(await card.locator('[data-testid="run-value-0"]').inputValue(), "105");
    // The action needs both what was found and what was done.
    const form = newestRow();
    await form.locator('[data-testid="action-done"]').fill("new reagent bottle opened");
    await form.locator('[data-testid="save-action"]').click();
    assert.match(await form.locator('[data-testid="action-message"]').innerText(), /say what was found/);
    await form.locator('[data-testid="action-found"]').fill("reagent bottle left uncapped overnight");
    await form.locator('[data-testid="save-action"]').click();
    await page.waitForFunction(() =>
      /Corrective action \(QA, .*found: reagent bottle left uncapped overnight — done: new reagent bottle opened/.test(
        document.querySelector('[data-testid="runs-GLU"] [data-testid="qc-run"]')?.innerText ?? ""));
    await waitSaved(page);
    assert.equal(await byTestId(page, "rerun-blocked").count(), 0);
    // Now the re-run is saved, linked to the action, and judged.
    await card.locator('[data-testid="new-run-GLU"]').click();
    await card.locator('[data-testid="run-value-0"]').fill("105");
    await card.locator('[data-testid="run-value-1"]').fill("265,0");
    await card.locator(".run-preview").waitFor();
    await card.locator('[data-testid="save-run"]').click();
    await page.waitForFunction(
      (n) => document.querySelectorAll('[data-testid="runs-GLU"] [data-testid="qc-run"]').length === n,
      before + 1,
    );
    const newest = newestRow();
    assert.match(await newest.innerText(), /QA/);
    assert.match(await newest.locator('[data-testid="qc-decision"]').innerText(), /^reject/);
    assert.match(await newest.locator('[data-testid="rerun-after"]').innerText(), /^re-run after the corrective action of 2026-11-27/);
    // Rejected again: it asks for its own action, and the board says so.
    assert.equal(await newest.locator('[data-testid="action-open"]').count(), 1);
    await byTestId(page, "nav-today").click();
    assert.equal(await byTestId(page, "awaiting-action").count(), 1);
    assert.match(await byTestId(page, "awaiting-action").innerText(), /^GLU — .*\(1-3s/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("an accepted re-run after the corrective action releases the patient results", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("qa");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-runs").click();
    const card = byTestId(page, "runs-GLU");
    const row = card.locator('[data-testid="qc-run"]').first();
    await row.locator('[data-testid="action-found"]').fill("calibrator past its stability");
    await row.locator('[data-testid="action-done"]').fill("recalibrated with a fresh calibrator vial");
    await row.locator('[data-testid="save-action"]').click();
    await card.locator('[data-testid="qc-run"]').first().locator('[data-testid="action-taken"]').waitFor();
    await waitSaved(page);
    const before = await card.locator('[data-testid="qc-run"]').count();
    await card.locator('[data-testid="new-run-GLU"]').click();
    await card.locator('[data-testid="run-value-0"]').fill("95");
    await card.locator('[data-testid="run-value-1"]').fill("265");
    await card.locator(".run-preview").waitFor();
    assert.doesNotMatch(await card.locator(".run-preview").innerText(), /^reject/);
    await card.locator('[data-testid="save-run"]').click();
    await page.waitForFunction(
      (n) => document.querySelectorAll('[data-testid="runs-GLU"] [data-testid="qc-run"]').length === n,
      before + 1,
    );
    await card.locator('[data-testid="samples-GLU"]').click();
    assert.doesNotMatch(await card.locator('[data-testid="qc-gate"]').innerText(), /rejected|No QC run/);
    await card.locator('[data-testid="samples-blank"]').fill("0.050");
    await card.locator('[data-testid="samples-lines"]').fill("S1 0.350");
    const first = card.locator('[data-testid="sample-row"]').first();
    await first.waitFor();
    assert.doesNotMatch(await first.innerText(), /held/);
    await byTestId(page, "nav-today").click();
    assert.equal(await byTestId(page, "awaiting-action").count(), 0);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("patient samples go through the calibration in use and are held when QC rejects", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "nav-runs").click();
    const card = byTestId(page, "runs-GLU");
    await card.locator('[data-testid="samples-GLU"]').click();
    // The demo's glucose QC this morning is rejected (an invented shift).
    assert.match(await card.locator('[data-testid="qc-gate"]').innerText(), /QC rejected today: hold/);
    await card.locator('[data-testid="samples-blank"]').fill("0.050");
    await card.locator('[data-testid="samples-lines"]').fill("S1 0.350\nS2 2.100\nS3 0.2O");
    assert.match(await card.locator('[data-testid="samples-problem"]').innerText(), /S3/);
    await card.locator('[data-testid="samples-lines"]').fill("S1 0.350\nS2 2.100\nS3 0.200");
    const rows = card.locator('[data-testid="sample-row"]');
    await rows.first().waitFor();
    assert.equal(await rows.count(), 3);
    assert.match(await rows.nth(0).innerText(), /S1.*held until QC is accepted/s);
    assert.match(await rows.nth(1).innerText(), /S2.*dilute 1:2/s);
    assert.match(await rows.nth(2).innerText(), /S3.*LL/s);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

// A long history is shown a month at a time: this month by default, the previous and
// next month one click away, or a range of days; every run is still judged with its
// whole history.
test("the QC runs view shows the chosen month or days only", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
    await byTestId(page, "nav-runs").click();
    const card = byTestId(page, "runs-GLU");
    assert.equal(await byTestId(page, "runs-period").inputValue(), "2026-11");
    const shown = await card.locator('[data-testid="runs-shown"]').innerText();
    const m = /^(\d+) run\(s\) in 2026-11 of (\d+) recorded\.$/.exec(shown);
    assert.ok(m, shown);
    assert.equal(Number(m[1]), await card.locator('[data-testid="qc-run"]').count());
    const rows = await card.locator('[data-testid="qc-run"] td:first-child').allInnerTexts();
    assert.ok(rows.length > 0 && rows.every((r) => r.startsWith("2026-11-")), rows.join("\n"));
    await byTestId(page, "runs-period-previous").click();
    await page.waitForFunction(() => /^31 run\(s\) in 2026-10 of /.test(document.querySelector('[data-testid="runs-GLU"] [data-testid="runs-shown"]').innerText));
    const october = await card.locator('[data-testid="qc-run"] td:first-child').allInnerTexts();
    assert.ok(october.length === 31 && october.every((r) => r.startsWith("2026-10-")), october.join("\n"));
    await byTestId(page, "runs-period-next").click();
    await page.waitForFunction(() => /in 2026-11 of/.test(document.querySelector('[data-testid="runs-GLU"] [data-testid="runs-shown"]').innerText));
    // The newest run keeps the decision the whole history gives it.
    assert.match(await card.locator('[data-testid="qc-run"]').first().locator('[data-testid="qc-decision"]').innerText(), /^reject/);
    // A range of days: both ends included; a reversed range is refused, nothing changes.
    await byTestId(page, "runs-period-from").fill("2026-11-20");
    await byTestId(page, "runs-period-to").fill("2026-11-10");
    await byTestId(page, "runs-period-range").click();
    assert.match(await byTestId(page, "runs-period-message").innerText(), /^to: the last day comes on or after the first/);
    assert.match(await byTestId(page, "runs-period-shown").innerText(), /Shown: 2026-11$/);
    await byTestId(page, "runs-period-from").fill("2026-11-10");
    await byTestId(page, "runs-period-to").fill("2026-11-20");
    await byTestId(page, "runs-period-range").click();
    await page.waitForFunction(() => /in 2026-11-10 to 2026-11-20 of/.test(document.querySelector('[data-testid="runs-GLU"] [data-testid="runs-shown"]').innerText));
    const days = await card.locator('[data-testid="qc-run"] td:first-child').allInnerTexts();
    assert.ok(days.length > 0 && days.every((r) => r.slice(0, 10) >= "2026-11-10" && r.slice(0, 10) <= "2026-11-20"), days.join("\n"));
    assert.equal(await byTestId(page, "runs-period").inputValue(), "", "no month while a range is shown");
    // The range steps by its own length.
    await byTestId(page, "runs-period-next").click();
    await page.waitForFunction(() => /in 2026-11-21 to 2026-12-01 of/.test(document.querySelector('[data-testid="runs-GLU"] [data-testid="runs-shown"]').innerText));
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a saved run redraws its own test's card only, and a card kept from before saves onto the lab as it is now", async () => {
  const profile = newProfile();
  let { context, page, problems } = await openApp(profile);
  const rows = (code) => byTestId(page, `runs-${code}`).locator('[data-testid="qc-run"]').count();
  const saveRun = async (code, values) => {
    const card = byTestId(page, `runs-${code}`);
    const before = await rows(code);
    await card.locator(`[data-testid="new-run-${code}"]`).click();
    for (const [k, v] of values.entries()) await card.locator(`[data-testid="run-value-${k}"]`).fill(v);
    await card.locator(".run-preview").waitFor();
    await card.locator('[data-testid="save-run"]').click();
    await page.waitForFunction(([c, n]) =>
      document.querySelectorAll(`[data-testid="runs-${c}"] [data-testid="qc-run"]`).length > n, [code, before]);
    await waitSaved(page);
    return before;
  };
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("kc");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-runs").click();
    await byTestId(page, "runs-TP").waitFor();
    // Mark the drawn cards: a card drawn again is a new element without the mark.
    await page.evaluate(() => document.querySelectorAll('section[data-testid^="runs-"]').forEach((c) => { c.cuvetteMark = true; }));
    const tp = await saveRun("TP", ["7.0", "4.6"]);
    const marked = await page.evaluate(() =>
      Object.fromEntries([...document.querySelectorAll('section[data-testid^="runs-"]')].map((c) => [c.dataset.testid, c.cuvetteMark === true])));
    assert.equal(marked["runs-TP"], false, "the card of the test that changed is drawn again");
    for (const [card, kept] of Object.entries(marked)) if (card !== "runs-TP") assert.equal(kept, true, `${card} is kept as it was`);
    // The creatinine card was drawn before the total protein run: its run must not
    // take that run away (a save from an old copy of the lab would void it).
    const crea = await saveRun("CREA", ["1.0", "4.0"]);
    assert.equal(await rows("TP"), tp + 1);
    await context.close();
    ({ context, page, problems } = await openApp(profile));
    await byTestId(page, "nav-runs").click();
    await byTestId(page, "runs-TP").waitFor();
    assert.equal(await rows("TP"), tp + 1, "both runs are in the journal after a reload");
    assert.equal(await rows("CREA"), crea + 1);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
