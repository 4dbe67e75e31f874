// Materials: a control reconstituted now, by whom, with an analyte of shorter
// stability; the usable-until of each, counted down by the engine.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitReady, waitSaved } from "./helpers.mjs";

test("a reconstituted control is recorded with its own and its analytes' stability", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "initials").fill("lb");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-materials").click();
    await byTestId(page, "new-material").click();
    await byTestId(page, "material-kind").selectOption("control");
    await byTestId(page, "material-name").fill("Control N (lyophilised)");
    await byTestId(page, "material-lot").fill("N-0425");
    await byTestId(page, "material-expiry").fill("31/12/2030");
    await byTestId(page, "material-days").fill("7");
    await byTestId(page, "material-analytes").fill("Bilirubin 2");
    await byTestId(page, "add-material").click();
    assert.match(await byTestId(page, "material-message").innerText(), /^expiry: .*YYYY-MM-DD or YYYY-MM/);
    await byTestId(page, "material-expiry").fill("2030-12");
    await byTestId(page, "add-material").click();
    const rows = byTestId(page, "material-row");
    await rows.first().waitFor();
    assert.equal(await rows.count(), 2);
    // Opened now, stable 7 days: 168 h left; the warning window is the smaller of 48 h
    // and a quarter of 168 h, so it is usable.
    assert.match(await rows.nth(0).innerText(), /Control N.*LB.*(6 d 23 h|7 d 0 h) left.*stability after opening.*usable/s);
    // Bilirubin, 2 days: 48 h left, window min(48 h, 12 h) = 12 h, so usable too.
    assert.match(await rows.nth(1).innerText(), /Bilirubin.*(1 d 23 h|2 d 0 h) left.*usable/s);
    await waitSaved(page);
    await waitSaved(page);
  await page.reload();
    await waitReady(page);
    assert.equal(await byTestId(page, "material-row").count(), 2);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("the countdown moves on by itself: a material expires while the page stays open", async () => {
  const { context, page, problems } = await openApp(newProfile(), undefined, { now: "2026-12-01T08:00:00Z" });
  try {
    await byTestId(page, "initials").fill("lb");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-materials").click();
    await byTestId(page, "new-material").click();
    await byTestId(page, "material-name").fill("Working reagent, on the bench");
    await byTestId(page, "material-expiry").fill("2027-06");
    await byTestId(page, "material-days").fill("0,5");
    await byTestId(page, "add-material").click();
    const row = byTestId(page, "material-row").first();
    await row.waitFor();
    assert.match(await row.innerText(), /12 h 0 min left.*usable/s);
    // 11 h 45 min later, without touching the page: inside the last quarter.
    await page.clock.runFor(11 * 3600_000 + 45 * 60_000);
    await page.waitForFunction(() => /expiring soon/.test(document.querySelector('[data-testid="material-row"]').textContent));
    await page.clock.runFor(30 * 60_000);
    await page.waitForFunction(() => /expired: do not use/.test(document.querySelector('[data-testid="material-row"]').textContent));
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

// The demo's multi-analyte control is still usable, but its ALT ran out yesterday: a QC
// run of ALT with it warns and is refused until the warning is acknowledged, and the
// acknowledgement stays on the run; creatinine with the same control is not warned.
test("a control past its stability for the test's analyte is refused until acknowledged, and the acknowledgement is kept", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("mk");
    await byTestId(page, "initials").press("Enter");
    await waitSaved(page);
    await byTestId(page, "nav-runs").click();
    const crea = byTestId(page, "runs-CREA");
    await crea.locator('[data-testid="new-run-CREA"]').click();
    await crea.locator('label:has-text("Multi-analyte control, normal (lyophilised) lot DQ-N-2611") [data-testid="material-used"]').check();
    assert.equal(await crea.locator('[data-testid="material-warnings"]').count(), 0, "creatinine is not an analyte with its own stability there");

    const alt = byTestId(page, "runs-ALT");
    const before = await alt.locator('[data-testid="qc-run"]').count();
    await alt.locator('[data-testid="new-run-ALT"]').click();
    // Any value: the decision does not matter here, only that the run can be saved.
    await alt.locator('[data-testid="run-value-0"]').fill("40");
    await alt.locator(".run-preview").waitFor();
    await alt.locator('label:has-text("Multi-analyte control, normal (lyophilised) lot DQ-N-2611") [data-testid="material-used"]').check();
    const warning = alt.locator('[data-testid="material-warnings"]');
    assert.match(await warning.innerText(), /Multi-analyte control, normal \(lyophilised\) lot DQ-N-2611: ALT is past its stability after opening or reconstitution in this material \(2026-11-26 \d\d:\d\d\)/);
    await alt.locator('[data-testid="save-run"]').click();
    assert.match(await alt.locator('[data-testid="run-message"]').innerText(), /past its stability, not opened or discarded: read the warning and tick the box/);
    assert.equal(await alt.locator('[data-testid="qc-run"]').count(), before);
    await alt.locator('[data-testid="acknowledge-materials"]').check();
    await alt.locator('[data-testid="save-run"]').click();
    await page.waitForFunction(
      (n) => document.querySelectorAll('[data-testid="runs-ALT"] [data-testid="qc-run"]').length === n,
      before + 1,
    );
    const kept = alt.locator('[data-testid="qc-run"]').first().locator('[data-testid="run-acknowledged"]');
    assert.match(await kept.innerText(), /^Used although warned \(acknowledged by MK\): .*ALT is past its stability/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

// Frozen aliquots: made from a reconstituted control, each counted down while frozen;
// thawed once (its after-thaw stability starts, and it cannot be thawed again); the
// demo's calibrator aliquot, already thawed, offers no thaw at all.
test("aliquots are frozen from a control and one is thawed, once", async () => {
  const { context, page, problems } = await openApp(newProfile());
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    await byTestId(page, "demo-banner").waitFor();
    await byTestId(page, "initials").fill("fa");
    await byTestId(page, "initials").press("Enter");
    await waitSaved(page);
    await byTestId(page, "nav-materials").click();
    const rows = byTestId(page, "material-row");
    const before = await rows.count();
    const thawedDemo = rows.filter({ hasText: "Multi-analyte calibrator, frozen aliquot 1/3" });
    assert.equal(await thawedDemo.locator('[data-testid="thaw"]').count(), 0);
    const control = rows.filter({ hasText: "Multi-analyte control, normal (lyophilised)", has: page.locator('[data-testid="freeze-aliquots"]') }).first();
    await control.locator('[data-testid="freeze-aliquots"]').click();
    await control.locator('[data-testid="aliquot-count"]').fill("2,5");
    await control.locator('[data-testid="aliquot-frozen-days"]').fill("30");
    await control.locator('[data-testid="aliquot-thaw-hours"]').fill("4");
    await control.locator('[data-testid="make-aliquots"]').click();
    assert.match(await control.locator('[data-testid="aliquot-message"]').innerText(), /aliquots: a whole number from 1 to 200/);
    await control.locator('[data-testid="aliquot-count"]').fill("2");
    await control.locator('[data-testid="make-aliquots"]').click();
    await waitSaved(page);
    const first = () => rows.filter({ hasText: "Multi-analyte control, normal (lyophilised), frozen aliquot 1/2" }).first();
    await first().waitFor();
    assert.match(await first().innerText(), /stability while frozen\tusable/);
    assert.equal(await rows.filter({ hasText: ", frozen aliquot 2/2" }).count() >= 1, true);
    await first().locator('[data-testid="thaw"]').click();
    await waitSaved(page);
    await page.waitForFunction(() => [...document.querySelectorAll('[data-testid="material-row"]')]
      .some((r) => /frozen aliquot 1\/2\tDQ-N-2611.*stability after thawing/.test(r.innerText)));
    assert.equal(await first().locator('[data-testid="thaw"]').count(), 0, "thawed once: no second thaw");
    assert.equal(await rows.filter({ hasText: ", frozen aliquot 2/2" }).first().locator('[data-testid="thaw"]').count(), 1);
    assert.ok((await rows.count()) > before);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});

test("a lot received unopened is opened later, reconstituted lots show their diluent, and a discard needs a reason", async () => {
  const { context, page, problems } = await openApp(newProfile(), undefined, { now: "2026-12-01T08:00:00Z" });
  try {
    await byTestId(page, "initials").fill("lb");
    await byTestId(page, "initials").press("Enter");
    await byTestId(page, "nav-materials").click();
    await byTestId(page, "new-material").click();
    await byTestId(page, "material-state").selectOption("received");
    await byTestId(page, "material-name").fill("Urea reagent R1");
    await byTestId(page, "material-lot").fill("UR-77");
    await byTestId(page, "material-expiry").fill("2027-06");
    await byTestId(page, "material-days").fill("30");
    await byTestId(page, "add-material").click();
    assert.match(await byTestId(page, "material-message").innerText(), /received \(not opened\) now by LB/);
    const urea = byTestId(page, "material-row").filter({ hasText: "Urea reagent R1" });
    // Not opened: usable to the maker's expiry, with the remark.
    assert.match(await urea.innerText(), /not opened yet/);
    await waitSaved(page);
    // An hour later it is opened: 30 days from then.
    await page.clock.runFor(3600_000);
    await urea.locator('[data-testid="open-material"]').click();
    await page.waitForFunction(() => [...document.querySelectorAll('[data-testid="material-row"]')].some((r) => /Urea reagent R1/.test(r.textContent) && /(29 d 23 h|30 d 0 h) left/.test(r.textContent)));
    assert.equal(await urea.locator('[data-testid="open-material"]').count(), 0, "opened once");
    // A lyophilised control made up with 5 mL of water (the form is still open).
    await byTestId(page, "material-state").selectOption("opened");
    await byTestId(page, "material-kind").selectOption("control");
    await byTestId(page, "material-name").fill("Control H (lyophilised)");
    await byTestId(page, "material-lot").fill("H-12");
    await byTestId(page, "material-expiry").fill("2027-03");
    await byTestId(page, "material-days").fill("7");
    await byTestId(page, "material-volume").fill("5");
    await byTestId(page, "add-material").click();
    assert.match(await byTestId(page, "material-message").innerText(), /^diluent: say what was added/);
    await byTestId(page, "material-diluent").fill("distilled water");
    await byTestId(page, "material-diluent-lot").fill("W-9");
    await byTestId(page, "add-material").click();
    assert.match(await byTestId(page, "material-message").innerText(), /reconstituted now by LB/);
    const control = byTestId(page, "material-row").filter({ hasText: "Control H" });
    assert.match(await control.innerText(), /H-12 \(made up with 5 mL distilled water lot W-9\)/);
    await waitSaved(page);
    // Discard the urea reagent: a reason is required; then it leaves the list and is
    // kept apart with who, when and why.
    await urea.locator('[data-testid="discard-material"]').click();
    await urea.locator('[data-testid="discard-confirm"]').click();
    assert.match(await urea.locator('[data-testid="discard-message"]').innerText(), /^reason: say why/);
    await urea.locator('[data-testid="discard-reason"]').fill("reagent turbid");
    await urea.locator('[data-testid="discard-confirm"]').click();
    await byTestId(page, "discarded-materials").waitFor();
    assert.equal(await byTestId(page, "material-row").filter({ hasText: "Urea reagent R1" }).count(), 0);
    await byTestId(page, "discarded-materials").click();
    assert.match(await byTestId(page, "discarded-row").innerText(), /Urea reagent R1\s+UR-77\s+2026-12-01 \d\d:\d\d\s+LB\s+reagent turbid/);
    await waitSaved(page);
    await page.reload();
    await waitReady(page);
    await byTestId(page, "nav-materials").click();
    assert.equal(await byTestId(page, "discarded-row").count(), 1);
    assert.match(await byTestId(page, "material-row").filter({ hasText: "Control H" }).innerText(), /W-9/);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
