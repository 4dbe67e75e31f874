// What is due this morning: the demo's board lists, per test, its QC and its
// calibration as the records imply (the latest glucose run rejected by 4-1s, which also
// asks for a look at the calibration; urea's calibration overdue, bilirubin's ending
// today, the rest done) and the instrument checks, each line leading to
// where it is dealt with; a calibration whose validity is shortened in Set-up becomes
// overdue. Fixed clock: 2026-11-27 12:30 in Nairobi (UTC+3).
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitSaved } from "./helpers.mjs";

test("the demo's board says what is due this morning and why, and a calibration past its validity is overdue", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
    await byTestId(page, "nav-today").click();
    const lines = () => byTestId(page, "due-line").allInnerTexts();
    const got = await lines();
    // Ten tests (QC and calibration each) and the three scheduled instrument checks.
    assert.equal(got.length, 23, got.join("\n"));
    assert.match(got[0], /^GLU QC: due — 0 of 1 today; the latest was rejected: corrective action, then re-run$/);
    assert.match(got[1], /^GLU calibration: triggered — QC of 2026-11-27 \d\d:\d\d rejected by 4-1s \(a systematic error\) after the calibration of 2026-11-23/);
    assert.match(got[2], /^UREA QC: done — 1 of 1 not rejected today/);
    // Urea's weekly calibration was missed.
    assert.match(got[3], /^UREA calibration: overdue — calibrated 2026-11-19 \d\d:\d\d, valid 7 days: expired 2026-11-26 \d\d:\d\d; recalibrate$/);
    assert.match(got[5], /^CREA calibration: done — calibrated 2026-11-25 \d\d:\d\d, valid until 2026-12-02/);
    // Bilirubin's calibration of a week ago ends later this morning.
    assert.match(got[13], /^TBIL calibration: due — calibrated 2026-11-20 13:15, valid 7 days: ends today at 13:15$/);
    assert.match(got[15], /^ALT calibration: done — calibrated 2026-11-07 \d\d:\d\d, valid until 2026-12-07/);
    // The reaction temperature and the water blank are checked every day: both were
    // last done yesterday; maintenance is weekly.
    assert.match(got[20], /^Temperature check: due — every day; last 2026-11-26 \d\d:\d\d: due today$/);
    assert.match(got[21], /^Photometer check: due — every day; last 2026-11-26 \d\d:\d\d: due today$/);
    assert.match(got[22], /^Maintenance: done — every 7 days; last 2026-11-21 \d\d:\d\d, next 2026-11-28$/);
    const states = await byTestId(page, "due-line").evaluateAll((els) => els.map((e) => e.dataset.state));
    assert.deepEqual(states, [
      "due", "triggered", "done", "overdue", "done", "done", "done", "done", "done", "done",
      "done", "done", "done", "due", "done", "done", "done", "done", "done", "done",
      "due", "due", "done",
    ]);
    // A line leads to its view.
    await byTestId(page, "due-line").nth(1).click();
    await byTestId(page, "view-calibration").waitFor({ state: "visible" });
    await byTestId(page, "nav-today").click();
    await byTestId(page, "due-line").first().click();
    await byTestId(page, "view-runs").waitFor({ state: "visible" });
    // The lab's policy: creatinine's calibration is valid 2 days. The one of 25 November
    // ran out this morning.
    await byTestId(page, "initials").fill("dl");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-setup").click();
    const crea = byTestId(page, "setup-test").nth(2);
    await crea.locator('[data-testid="correct-test"]').click();
    const form = crea.locator('details:has([data-testid="correct-test-valid-days"])');
    await form.locator('[data-testid="correct-test-valid-days"]').fill("2.5");
    await form.locator('[data-testid="correction-reason"]').fill("validity from the reagent insert");
    await form.locator('[data-testid="save-correction"]').click();
    assert.match(await form.locator('[data-testid="correction-message"]').innerText(), /calibration valid for: a whole number/);
    await form.locator('[data-testid="correct-test-valid-days"]').fill("2");
    await form.locator('[data-testid="save-correction"]').click();
    await waitSaved(page);
    await byTestId(page, "nav-today").click();
    await page.waitForFunction(() => document.querySelectorAll('[data-testid="due-line"]')[5]?.dataset.state === "overdue");
    assert.match((await lines())[5], /^CREA calibration: overdue — calibrated 2026-11-25 \d\d:\d\d, valid 2 days: expired 2026-11-27 \d\d:\d\d; recalibrate$/);
    // The lab now checks the photometer weekly and maintains the analyser every 5 days:
    // the last photometer check was yesterday (next on 3 December), the last maintenance
    // on the 21st (due on the 26th, so overdue). A bad interval is refused.
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "check-days-photometer-check").fill("weekly");
    await byTestId(page, "save-checks").click();
    assert.match(await byTestId(page, "checks-message").innerText(), /^photometer check: give whole days from 1 to 366/);
    await byTestId(page, "check-days-photometer-check").fill("7");
    await byTestId(page, "check-days-maintenance").fill("5");
    await byTestId(page, "save-checks").click();
    assert.equal(await byTestId(page, "checks-message").innerText(), "check intervals saved");
    await waitSaved(page);
    await byTestId(page, "nav-today").click();
    await page.waitForFunction(() => document.querySelectorAll('[data-testid="due-line"]')[22]?.dataset.state === "overdue");
    const checks = (await lines()).slice(20);
    assert.match(checks[0], /^Temperature check: due/);
    assert.match(checks[1], /^Photometer check: done — every 7 days; last 2026-11-26 \d\d:\d\d, next 2026-12-03$/);
    assert.match(checks[2], /^Maintenance: overdue — every 5 days; last 2026-11-21 \d\d:\d\d: was due 2026-11-26$/);
    await byTestId(page, "due-line").nth(22).click();
    await byTestId(page, "view-instrument").waitFor({ state: "visible" });
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
