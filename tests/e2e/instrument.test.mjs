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
    await byTestId(page, "demo-banner").waitFor();
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
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("pn");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-instrument").click();
    // The demo's water blanks include a reading stored as −0.
    const rows = await byTestId(page, "instrument-row").allInnerTexts();
    assert.ok(rows.some((r) => /photometer check \(absorbance\)\t0\.0000[\t ]/.test(r)), rows.join("\n"));
    assert.ok(rows.every((r) => !/\t-0(\.0+)?[\t ]/.test(r)), rows.join("\n"));
    await byTestId(page, "instrument-event").selectOption("photometer-check");
    await byTestId(page, "instrument-value").fill("-0,0004");
    await byTestId(page, "add-instrument-entry").click();
    await page.waitForFunction(() => /-0\.0004/.test(document.querySelector('[data-testid="instrument-row"]').innerText));
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

// The lab's absorbance standards (here the example set, marked to be verified against
// the certificate): a reading outside its tolerance fails the check, says so, and shows
// on the board until a reading of that standard passes.
test("a photometer check outside its standard's tolerance fails and shows on the board", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("pc");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "standards-example").click();
    assert.match(await byTestId(page, "standards-message").innerText(), /from memory — verify against your certificate/);
    assert.match(await byTestId(page, "standards-text").inputValue(), /^water blank; 340; 0\.000; 0\.005\ngrey filter, low; 340; 0\.500; 0\.010\n/);
    await byTestId(page, "save-standards").click();
    await page.waitForFunction(() => document.querySelector('[data-testid="standards-message"]')?.innerText === "standards saved");
    await byTestId(page, "nav-instrument").click();
    await byTestId(page, "instrument-event").selectOption("photometer-check");
    await byTestId(page, "instrument-standard").selectOption("grey filter, low");
    await byTestId(page, "instrument-value").fill("0,530");
    await byTestId(page, "add-instrument-entry").click();
    assert.match(await byTestId(page, "instrument-message").innerText(), /FAILED on grey filter, low \(expected 0\.500 ± 0\.010\)/);
    await page.waitForFunction(() => /0\.5300 \(grey filter, low: expected 0\.500 ± 0\.010, failed\)/.test(document.querySelector('[data-testid="instrument-row"]').innerText));
    await byTestId(page, "nav-today").click();
    assert.match(await byTestId(page, "photometer-failed").innerText(), /^Photometer check FAILED on grey filter, low \(340 nm\) at 2026-11-27 \d\d:\d\d: read 0\.5300, expected 0\.500 ± 0\.010/);
    await byTestId(page, "nav-instrument").click();
    await byTestId(page, "instrument-standard").selectOption("grey filter, low");
    await byTestId(page, "instrument-value").fill("0.504");
    await byTestId(page, "add-instrument-entry").click();
    assert.match(await byTestId(page, "instrument-message").innerText(), /passed on grey filter, low/);
    await byTestId(page, "nav-today").click();
    assert.equal(await byTestId(page, "photometer-failed").count(), 0);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
