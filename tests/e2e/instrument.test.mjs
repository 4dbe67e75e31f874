// The instrument log: the demo's daily checks, and a temperature outside the lab's
// limits recorded and flagged.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId } from "./helpers.mjs";

test("a reaction temperature outside the limits is recorded and flagged", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "initials").fill("pn");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-instrument").click();
    const before = await byTestId(page, "instrument-row").count();
    assert.ok(before > 0, "the demo has instrument checks");
    await byTestId(page, "instrument-event").selectOption("temperature-check");
    await byTestId(page, "instrument-value").fill("38,2");
    await byTestId(page, "instrument-note").fill("incubator display 38");
    await byTestId(page, "add-instrument-entry").click();
    assert.match(await byTestId(page, "instrument-message").innerText(), /outside the limits/);
    const newest = byTestId(page, "instrument-row").first();
    assert.match(await newest.innerText(), /PN.*temperature check.*38\.2 °C \(too high\)/s);
    assert.equal(await byTestId(page, "instrument-row").count(), before + 1);
    await byTestId(page, "nav-today").click();
    assert.match(await byTestId(page, "today-temperature").innerText(), /38\.2 °C, outside the limits/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a photometer reading near zero is shown to 4 decimals, never as -0", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "initials").fill("pn");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-instrument").click();
    // The demo's water blanks include a reading stored as −0.
    const rows = await byTestId(page, "instrument-row").allInnerTexts();
    assert.ok(rows.some((r) => /photometer check \(absorbance\)\t0\.0000\t/.test(r)), rows.join("\n"));
    assert.ok(rows.every((r) => !/\t-0(\.0+)?\t/.test(r)), rows.join("\n"));
    await byTestId(page, "instrument-event").selectOption("photometer-check");
    await byTestId(page, "instrument-value").fill("-0,0004");
    await byTestId(page, "add-instrument-entry").click();
    await page.waitForFunction(() => /-0\.0004/.test(document.querySelector('[data-testid="instrument-row"]').innerText));
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
