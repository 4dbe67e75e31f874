// Set-up from nothing: a new lab's first test and control level, checked by the
// engine-side forms, then a QC run against that level.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitReady, waitSaved } from "./helpers.mjs";

test("a lab sets up its first test and control level, then runs QC", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "lab-name-input").fill("Rural health centre lab");
    await byTestId(page, "lab-name-input").press("Enter");
    assert.equal(await byTestId(page, "lab-name").innerText(), "Rural health centre lab");
    await byTestId(page, "new-test").click();
    await byTestId(page, "test-code").fill("urea");
    await byTestId(page, "test-name").fill("Urea (urease-GLDH)");
    await byTestId(page, "test-unit").fill("mg/dL");
    await byTestId(page, "test-wavelength").fill("34O");
    await byTestId(page, "add-test").click();
    // Without initials nothing is recorded.
    assert.match(await byTestId(page, "setup-message").innerText(), /initials/);
    await byTestId(page, "initials").fill("mk");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "add-test").click();
    assert.match(await byTestId(page, "setup-message").innerText(), /^wavelength/);
    await byTestId(page, "test-wavelength").fill("340");
    await byTestId(page, "test-mode").selectOption("fixed-time");
    await byTestId(page, "add-test").click();
    await byTestId(page, "setup-test").first().waitFor();
    assert.match(await byTestId(page, "setup-test").first().innerText(), /UREA Urea/);
    await byTestId(page, "new-level-UREA").click();
    await byTestId(page, "level-name").fill("Normal");
    await byTestId(page, "level-lot").fill("U-17");
    await byTestId(page, "level-mean").fill("32");
    await byTestId(page, "level-sd").fill("0");
    await byTestId(page, "add-level").click();
    assert.match(await byTestId(page, "level-message").innerText(), /^SD/);
    await byTestId(page, "level-sd").fill("1,6");
    await byTestId(page, "add-level").click();
    await page.waitForFunction(() => /Normal \(lot U-17\): 32 ± 1.6 mg\/dL/.test(document.querySelector('[data-testid="setup-test"]').textContent));
    // QC against the new level: 36 mg/dL is +2.5 SD → 1-2s warning.
    await byTestId(page, "nav-runs").click();
    await byTestId(page, "new-run-UREA").click();
    await byTestId(page, "run-value-0").fill("36");
    await page.locator(".run-preview").waitFor();
    assert.match(await page.locator(".run-preview").innerText(), /^warning/);
    await byTestId(page, "save-run").click();
    await byTestId(page, "qc-run").first().waitFor();
    await waitSaved(page);
    await waitSaved(page);
  await page.reload();
    await waitReady(page);
    assert.equal(await byTestId(page, "qc-run").count(), 1);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
