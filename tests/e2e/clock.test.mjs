// The bench at any hour: today's board and a new QC run with the demo lab, on a fixed
// clock just after local midnight, late in the evening, and on the last day of a month,
// each in a zone far from UTC. Loading the demo places its newest record a few minutes
// before "now", so nothing is in the future and the story (this morning's rejected
// glucose run, the thawed aliquot near its end) is the same at every hour.
import { test } from "node:test";
import assert from "node:assert/strict";
import { openApp, newProfile, byTestId, waitSaved } from "./helpers.mjs";

const CASES = [
  // 00:30 local, UTC+14: the local date is a day ahead of UTC's.
  { name: "early morning", now: "2026-03-09T10:30:00Z", zone: "Pacific/Kiritimati", date: "2026-03-10", time: "00:30" },
  // 23:50 local, UTC−9 (Adak keeps summer time from 8 March): a day behind UTC.
  { name: "late evening", now: "2026-03-11T08:50:00Z", zone: "America/Adak", date: "2026-03-10", time: "23:50" },
  // 23:58 on 30 April, UTC+3: the next run would be in May.
  { name: "last day of a month", now: "2026-04-30T20:58:00Z", zone: "Africa/Nairobi", date: "2026-04-30", time: "23:58" },
];

for (const c of CASES) {
  test(`the board and a new QC run at a fixed clock: ${c.name} (${c.zone})`, async () => {
    const { context, page, problems } = await openApp(newProfile(), undefined, { now: c.now, zone: c.zone });
    try {
      await byTestId(page, "nav-setup").click();
      await byTestId(page, "load-demo").click();
      await byTestId(page, "demo-banner").waitFor();
      await byTestId(page, "initials").fill("qa");
      await byTestId(page, "initials").press("Enter");
      await byTestId(page, "nav-today").click();
      const board = byTestId(page, "view-today");
      assert.match(await board.locator("h3").filter({ hasText: /\d{4}-\d\d-\d\d/ }).first().innerText(), new RegExp(c.date));
      const glu = byTestId(page, "today-test").first();
      // The demo's glucose run of this morning: minutes ago, today's date, rejected.
      assert.match(await glu.innerText(), new RegExp(`GLU.*${c.date} \\d\\d:\\d\\d reject.*reject: hold patient results`, "s"));
      assert.match(await byTestId(page, "today-materials").innerText(), /frozen aliquot.*expiring/s);

      await byTestId(page, "nav-runs").click();
      const card = byTestId(page, "runs-GLU");
      // This morning's rejection gets its corrective action first.
      const rejected = card.locator('[data-testid="qc-run"]').first();
      await rejected.locator('[data-testid="action-found"]').fill("reagent lot changed without recalibration");
      await rejected.locator('[data-testid="action-done"]').fill("recalibrated");
      await rejected.locator('[data-testid="save-action"]').click();
      await card.locator('[data-testid="qc-run"]').first().locator('[data-testid="action-taken"]').waitFor();
    await waitSaved(page);
      const before = await card.locator('[data-testid="qc-run"]').count();
      await card.locator('[data-testid="new-run-GLU"]').click();
      await card.locator('[data-testid="run-value-0"]').fill("95");
      await card.locator('[data-testid="run-value-1"]').fill("265");
      await card.locator(".run-preview").waitFor();
      await card.locator('[data-testid="save-run"]').click();
      await page.waitForFunction(
        (n) => document.querySelectorAll('[data-testid="runs-GLU"] [data-testid="qc-run"]').length === n,
        before + 1,
      );
      // The run just saved is the newest, dated by the page's clock in the lab's zone.
      const newest = await card.locator('[data-testid="qc-run"]').first().innerText();
      assert.match(newest, new RegExp(`${c.date} ${c.time}.*QA`, "s"));
      await byTestId(page, "nav-today").click();
      assert.match(await byTestId(page, "today-test").first().innerText(), new RegExp(`GLU.*${c.date} ${c.time}`, "s"));
      assert.deepEqual(problems, []);
    } finally {
      await context.close();
    }
  });
}

// The countdowns trust the PC's clock, so the board says when it is in doubt: a day or
// more since the last sitting (confirmed with one click), and a clock set back behind
// the stored records. Same profile, three sittings on fixed clocks (UTC+3).
test("the board doubts a clock that jumped a weekend or went back behind the records", async () => {
  const profile = newProfile();
  let { context, page, problems } = await openApp(profile, undefined, { now: "2026-11-27T09:30:00Z" });
  try {
    await byTestId(page, "nav-setup").click();
    await byTestId(page, "load-demo").click();
    // The demo is opened asynchronously: wait for it, then for its records to be saved.
    await byTestId(page, "demo-banner").waitFor();
    await waitSaved(page);
    await byTestId(page, "nav-today").click();
    assert.equal(await byTestId(page, "clock-doubt").count(), 0, "no doubt on a steady clock");
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
  ({ context, page, problems } = await openApp(profile, undefined, { now: "2026-11-30T05:00:00Z" }));
  try {
    await byTestId(page, "nav-today").click();
    const doubt = byTestId(page, "clock-doubt");
    assert.match(await doubt.innerText(), /^Cuvette last ran here 2026-11-27 12:3\d; the clock now reads 2026-11-30 08:00\. If the lab was closed, carry on/);
    await byTestId(page, "clock-right").click();
    assert.equal(await byTestId(page, "clock-doubt").count(), 0);
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
  ({ context, page, problems } = await openApp(profile, undefined, { now: "2026-11-26T09:00:00Z" }));
  try {
    await byTestId(page, "nav-today").click();
    const doubt = byTestId(page, "clock-doubt");
    assert.match(await doubt.innerText(), /^Check the PC's clock: it reads 2026-11-26 12:00, earlier than a stored record \(2026-11-27 12:2\d\)/);
    assert.equal(await byTestId(page, "clock-right").count(), 0, "a clock behind the records cannot be waved away");
    assert.deepEqual(problems, []);
  } finally {
    await context.close();
  }
});
