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
    await byTestId(page, "demo-banner").waitFor();
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
    // Its curve is drawn before it is saved: calibrators, the fit, the last accepted
    // curve and the residual strip, on a canvas with ink on it.
    const curve = card.locator('[data-testid="curve-chart"]');
    await curve.waitFor();
    const inked = await curve.evaluate((c) => {
      const d = c.getContext("2d").getImageData(0, 0, c.width, c.height).data;
      let n = 0;
      for (let i = 0; i < d.length; i += 4) if (d[i] < 200 || d[i + 1] < 200 || d[i + 2] < 200) n++;
      return n;
    });
    assert.ok(inked > 500, `only ${inked} inked pixels`);
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

// The demo's thawed calibrator aliquot has about an hour left after thawing. Two hours
// later (same records, the clock moved on) it is past that: a calibration made with it
// warns, is refused until acknowledged, and keeps the acknowledgement on its row.
test("a calibration with a calibrator past its stability is refused until acknowledged", async () => {
  const profile = newProfile();
  let { context, page, problems } = await openApp(profile, undefined, { now: "2026-11-27T09:30:00Z" });
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    // The demo is opened asynchronously: wait for it, then for its records to be saved.
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
  } finally {
    await context.close();
  }
  ({ context, page, problems } = await openApp(profile, undefined, { now: "2026-11-27T11:30:00Z" }));
  try {
    await byTestId(page, "initials").fill("ct");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-calibration").click();
    const card = byTestId(page, "calibration-GLU");
    const before = await card.locator('[data-testid="calibration-row"]').count();
    await card.locator('[data-testid="new-calibration-GLU"]').click();
    await card.locator('[data-testid="calibration-blank"]').fill("0.052 0.053");
    await card.locator('[data-testid="calibration-readings"]').fill("100: 0.470 0.474");
    assert.match(await card.locator('[data-testid="calibration-verdict"]').innerText(), /^accepted/);
    await card.locator('label:has-text("Multi-analyte calibrator, frozen aliquot 1/3") [data-testid="material-used"]').check();
    await card.locator('label:has-text("Glucose reagent R1") [data-testid="material-used"]').check();
    const warning = card.locator('[data-testid="material-warnings"]');
    const lines = await warning.locator("li").allInnerTexts();
    assert.equal(lines.length, 1, "the reagent is within its stability");
    assert.match(lines[0], /^Multi-analyte calibrator, frozen aliquot 1\/3 lot DC-0907: past its stability after thawing \(2026-11-27 \d\d:\d\d\)$/);
    await card.locator('[data-testid="save-calibration"]').click();
    assert.match(await card.locator('[data-testid="calibration-message"]').innerText(), /past its stability, not opened or discarded: read the warning and tick the box/);
    assert.equal(await card.locator('[data-testid="calibration-row"]').count(), before);
    await card.locator('[data-testid="acknowledge-materials"]').check();
    await card.locator('[data-testid="save-calibration"]').click();
    await page.waitForFunction(
      (n) => document.querySelectorAll('[data-testid="calibration-GLU"] [data-testid="calibration-row"]').length === n,
      before + 1,
    );
    const row = card.locator('[data-testid="calibration-row"]').first();
    assert.match(await row.locator('[data-testid="calibration-acknowledged"]').innerText(), /^Used although warned \(acknowledged by CT\): Multi-analyte calibrator, frozen aliquot/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
