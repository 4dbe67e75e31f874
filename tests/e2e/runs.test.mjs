// A new QC run: the decision is shown before saving, from the engine with the test's
// history; saved with the technician's initials; a rejected run says to hold results.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId } from "./helpers.mjs";

test("a new QC run is judged before it is saved", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "initials").fill("qa");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-runs").click();
    const card = byTestId(page, "runs-GLU");
    const before = await card.locator('[data-testid="qc-run"]').count();
    await card.locator('[data-testid="new-run-GLU"]').click();
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
    await card.locator('[data-testid="save-run"]').click();
    await page.waitForFunction(
      (n) => document.querySelectorAll('[data-testid="runs-GLU"] [data-testid="qc-run"]').length === n,
      before + 1,
    );
    const newest = byTestId(page, "runs-GLU").locator('[data-testid="qc-run"]').first();
    assert.match(await newest.innerText(), /QA/);
    assert.match(await newest.locator('[data-testid="qc-decision"]').innerText(), /^reject/);
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
