// The calibration view: history from the demo lab, a new calibration fitted and judged
// live by the engine, saved with the technician's initials, still there after reload.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitReady, waitSaved } from "./helpers.mjs";

test("a new glucose calibration is fitted, judged, saved and kept", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "nav-calibration").click();
    const card = byTestId(page, "calibration-GLU");
    const before = await card.locator('[data-testid="calibration-row"]').count();
    assert.ok(before >= 2, "the demo has earlier glucose calibrations");
    // Trends of the reagent blank and the factor over those calibrations.
    assert.equal(await card.locator('[data-testid="trend-chart"]').count(), 2);
    await card.locator('[data-testid="new-calibration-GLU"]').click();
    // A reagent blank far too high: rejected, with the reason.
    await card.locator('[data-testid="calibration-blank"]').fill("0,130 0,131");
    await card.locator('[data-testid="calibration-readings"]').fill("100: 0.552 0.556");
    await card.locator('[data-testid="calibration-verdict"]').waitFor();
    assert.match(await card.locator('[data-testid="calibration-verdict"]').innerText(), /^rejected/);
    assert.match(await card.innerText(), /reagent blank absorbance 0\.1305 is outside/);
    // Typing error: a clear message, nothing computed.
    await card.locator('[data-testid="calibration-readings"]').fill("100: 0.47o");
    assert.match(await card.locator('[data-testid="calibration-input-problem"]').innerText(), /calibrator line 1: "0\.47o" is not a number/);
    // A good one: factor 100 / (0.472 − 0.0525) = 238.4, close to the last.
    await card.locator('[data-testid="calibration-blank"]').fill("0.052 0.053");
    await card.locator('[data-testid="calibration-readings"]').fill("100: 0.470 0.474");
    assert.match(await card.locator('[data-testid="calibration-verdict"]').innerText(), /^accepted/);
    assert.match(await card.locator('[data-testid="calibration-params"]').innerText(), /factor = 238\.37/);
    // No initials yet: refused with the reason.
    await card.locator('[data-testid="save-calibration"]').click();
    assert.match(await card.locator('[data-testid="calibration-message"]').innerText(), /initials/);
    await byTestId(page, "initials").fill("zt");
    await byTestId(page, "initials").press("Enter");
    await card.locator('[data-testid="save-calibration"]').click();
    await page.waitForFunction(
      (n) => document.querySelectorAll('[data-testid="calibration-GLU"] [data-testid="calibration-row"]').length === n,
      before + 1,
    );
    await waitSaved(page);
    await waitSaved(page);
  await page.reload();
    await waitReady(page);
    const rows = byTestId(page, "calibration-GLU").locator('[data-testid="calibration-row"]');
    assert.equal(await rows.count(), before + 1);
    assert.match(await rows.first().innerText(), /ZT/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
