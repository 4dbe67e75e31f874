// QC planning in the browser: each test's rejecting rules give the chance of rejecting a
// good run and of catching a shift of 1–4 SD or a random error 1.5–3 times the SD, from a Monte Carlo that runs in slices (the
// page answers meanwhile, a progress bar shows how far, and it can be cancelled).
// Expected shape from the rule definitions: a small false-rejection chance that grows
// with the shift; the demo's glucose uses the default rejecting rules 1-3s, 2-2s, R-4s,
// 4-1s, 10-x with two levels (those figures are in the planning reference test).
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitSaved } from "./helpers.mjs";

test("rejection chances for each test's rules: computed in slices, rising with the shift, and cancellable", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
    await byTestId(page, "nav-charts").click();
    const glu = byTestId(page, "planning-GLU");
    assert.match(await glu.innerText(), /rejecting rules 1-3s, 2-2s, R-4s, 4-1s, 10-x; 2 control result\(s\) per run/);
    await glu.locator('[data-testid="plan-run-GLU"]').click();
    await glu.locator('[data-testid="plan-progress"]').waitFor();
    // The page answers while it computes.
    assert.equal(await page.evaluate(() => 1 + 1), 2);
    await page.waitForFunction(() => document.querySelectorAll('[data-testid="planning-GLU"] [data-testid="plan-row"]').length === 9, null, { timeout: 240000 });
    const p = (await glu.locator('[data-testid="plan-row"] td:nth-child(2)').allInnerTexts()).map(Number);
    assert.ok(p[0] > 0.005 && p[0] < 0.05, `false rejection ${p[0]}`);
    for (let k = 1; k < 5; k++) assert.ok(p[k] > p[k - 1], `rises with the shift: ${p}`);
    assert.ok(p[4] > 0.95, `a 4 SD shift is caught: ${p[4]}`);
    // Random error 1.5, 2, 2.5 and 3 times the SD: caught more often than no error, and
    // more so as it grows.
    assert.match(await glu.locator('[data-testid="plan-row"]').nth(5).innerText(), /^random error × 1.5/);
    assert.match(await glu.locator('[data-testid="plan-row"]').nth(8).innerText(), /^random error × 3/);
    assert.ok(p[5] > p[0], `random error: ${p}`);
    for (let k = 6; k < 9; k++) assert.ok(p[k] > p[k - 1], `rises with the random error: ${p}`);
    assert.equal(await glu.locator('[data-testid="plan-progress"]').count(), 0);
    // The power curves: chance of rejection against the shift and against the random
    // error, each drawn on a canvas.
    await page.waitForFunction(() => document.querySelectorAll('[data-testid="planning-GLU"] [data-testid="trend-chart"]').length === 2);

    const other = byTestId(page, "planning-CREA");
    await other.locator('[data-testid="plan-run-CREA"]').click();
    await other.locator('[data-testid="plan-cancel"]').click();
    await other.locator('[data-testid="plan-message"]').waitFor();
    assert.match(await other.locator('[data-testid="plan-message"]').innerText(), /^Cancelled after \d+ simulated runs/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("the monthly QC review: each level's statistics, bias and SDI, and the rules broken, on screen and as a printed sheet", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
    // The lab sets glucose's quality goal: an allowable total error of 8 %.
    await byTestId(page, "initials").fill("qr");
    await byTestId(page, "initials").press("Enter");
    const glucose = byTestId(page, "setup-test").first();
    await glucose.locator('[data-testid="correct-test"]').click();
    const form = glucose.locator('details:has([data-testid="correct-test-tea"])');
    // A published figure fills the field (with its source beside it), which stays editable.
    const pick = form.locator('[data-testid="correct-test-tea-suggestion"]');
    const options = await pick.locator("option").allInnerTexts();
    const glucoseTable = options.findIndex((o) => /^Glucose 10 % — US CLIA limit as printed in Biochem Med 2018/.test(o));
    assert.ok(glucoseTable > 0, options.join("\n"));
    assert.ok(options.some((o) => /^Glucose 8 % — .*from memory — verify/.test(o)));
    await pick.selectOption({ index: glucoseTable });
    await page.waitForFunction(() => document.querySelector('[data-testid="correct-test-tea"]').value === "10");
    await form.locator('[data-testid="correct-test-tea"]').fill("8");
    await form.locator('[data-testid="correction-reason"]').fill("quality goal set");
    await form.locator('[data-testid="save-correction"]').click();
    await waitSaved(page);
    await byTestId(page, "nav-charts").click();
    const review = byTestId(page, "monthly-review");
    assert.equal(await review.locator('[data-testid="review-month"]').inputValue(), "2026-11");
    const rows = review.locator('[data-testid="table-qc-review"] tbody tr');
    // Ten tests of two levels, and the new lot of the lipid control's normal level.
    assert.equal(await rows.count(), 21, "one row per control level");
    const glu = await rows.first().innerText();
    assert.match(glu, /^GLU\t/);
    assert.match(glu, /2-2s ×\d/);
    // tea_pct, sigma and the QC design that sigma suggests.
    assert.match(glu, /\t8\t-?\d+\.\d\t(1-3s|the full multirule)/);
    // A month before the demo's history: no results, no statistics.
    await review.locator('[data-testid="review-month"]').fill("2026-07");
    await review.locator('[data-testid="review-month"]').dispatchEvent("change");
    await page.waitForFunction(() => /\t0\t\t\t/.test(document.querySelector('[data-testid="table-qc-review"] tbody tr').innerText));
    await byTestId(page, "print-month-sheet").click();
    await byTestId(page, "day-sheet").waitFor();
    assert.equal(await byTestId(page, "sheet-part").count(), 1);
    assert.match(await byTestId(page, "day-sheet").innerText(), /Monthly QC review — 2026-07/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("the calculation verification report runs the reference cases in the browser and prints", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "verify-run").click();
    const summary = await byTestId(page, "verify-summary").innerText();
    const m = /^Cuvette \d+\.\d+\.\d+, 2026-11-27 \d\d:\d\d: (\d+) of (\d+) checks passed\.$/.exec(summary);
    assert.ok(m, summary);
    assert.equal(m[1], m[2]);
    assert.ok(Number(m[2]) >= 15);
    const rows = await byTestId(page, "table-verification").locator("tbody tr").allInnerTexts();
    assert.equal(rows.length, Number(m[2]));
    assert.ok(rows.some((r) => /^NIST Misra1a.*\tpass$/s.test(r)));
    assert.ok(rows.some((r) => /^sigma metric.*Biochem Med 2018;28\(2\):020711.*17 of 17.*\tpass$/s.test(r)));
    assert.ok(rows.every((r) => r.endsWith("\tpass")));
    await byTestId(page, "verify-print").click();
    assert.match(await byTestId(page, "day-sheet").innerText(), /Calculation verification — Cuvette \d+\.\d+\.\d+, run 2026-11-27/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a new control lot run beside the old one: the board counts its results toward its own target and says when the old lot runs out", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "initials").fill("lc");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
    await byTestId(page, "new-level-GLU").click();
    const form = page.locator('details:has([data-testid="new-level-GLU"])');
    await form.locator('[data-testid="level-name"]').fill("Normal");
    await form.locator('[data-testid="level-lot"]').fill("DQ-N-2702");
    await form.locator('[data-testid="level-mean"]').fill("96");
    await form.locator('[data-testid="level-sd"]').fill("2,9");
    await form.locator('[data-testid="add-level"]').click();
    await waitSaved(page);
    await byTestId(page, "nav-today").click();
    // The demo's own changeover (cholesterol) is listed too; glucose comes first.
    await page.waitForFunction(() => document.querySelectorAll('[data-testid="crossover-line"]').length === 2);
    const line = await byTestId(page, "crossover-line").first().innerText();
    // The old lot's control vial (lot DQ-N-2611) is in the demo's materials list.
    assert.match(line, /^GLU Normal: new lot DQ-N-2702 has 0 accepted result\(s\) toward its own target, 20 still needed; old lot DQ-N-2611 runs out 20\d\d-\d\d-\d\d \d\d:\d\d \(/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
