// Drives the isotint workbench of a service in token mode in Debian's headless Chromium: the
// page asks for a token, explains a refused one in words, signs in a writer and shows their
// name and role, hides what a writer may not do (archive, the audit trail) and explains a 403
// in words, keeps the token across a reload of the tab, and after signing in an admin shows
// the calibration's audit rows and the archive button and downloads its file with the token.
//
// Usage: node token_mode.mjs BASE_URL WRITER_TOKEN ADMIN_TOKEN CALIBRATION_ID
// The tokens are named lab-writer and lab-admin; the calibration was imported into the
// library (so its audit trail has an import row).
// Exits 0 when every step passed; prints one line per step and a closing "N passed, N failed".

import fs from 'node:fs';
import { STEP_TIMEOUT, check, run, shot, step } from './harness.mjs';

const [baseUrl, writerToken, adminToken, calibrationId] = process.argv.slice(2);
if (!baseUrl || !writerToken || !adminToken || !calibrationId) {
  console.error('usage: node token_mode.mjs BASE_URL WRITER_TOKEN ADMIN_TOKEN CALIBRATION_ID');
  process.exit(2);
}

// A well-formed token that the service does not know.
const UNKNOWN_TOKEN = `isotint_${'0'.repeat(64)}`;

async function signIn(page, token) {
  await page.getByLabel('Token', { exact: true }).fill(token);
  await page.getByRole('button', { name: 'Sign in' }).click();
}

async function whoText(page) {
  return (await page.locator('#who-text').textContent()).trim();
}

async function main(browser) {
  const problems = [];
  const context = await browser.newContext({ viewport: { width: 1366, height: 768 }, acceptDownloads: true });
  const page = await context.newPage();
  page.setDefaultTimeout(STEP_TIMEOUT);
  page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
  const calibrationUrl = `${baseUrl}#/calibrations/${encodeURIComponent(calibrationId)}`;

  await step('the workbench asks for a token before it shows anything', async () => {
    await page.goto(baseUrl);
    const dialog = page.getByRole('dialog', { name: 'Sign in with a token' });
    await dialog.waitFor();
    check(await page.locator('#sign-in-error').isHidden(), 'an error is shown before any token was typed');
    check((await page.locator('#cal-list li').count()) === 0, 'the calibration list was shown without a token');
    await shot(page, 'token-mode-sign-in');
  });

  await step('an unknown token is refused in words and the dialog stays', async () => {
    await signIn(page, UNKNOWN_TOKEN);
    const error = page.locator('#sign-in-error');
    await error.waitFor({ state: 'visible' });
    const text = await error.textContent();
    check(/unknown here or has been revoked/.test(text) && /admin/.test(text), `unexpected explanation: ${text}`);
    check(await page.getByRole('dialog').isVisible(), 'the dialog closed after a refused token');
  });

  await step('a writer signs in and sees their name and role', async () => {
    await signIn(page, writerToken);
    await page.getByRole('dialog').waitFor({ state: 'hidden' });
    await page.getByText('Signed in as lab-writer · role writer').waitFor();
    await page.locator(`#cal-list a[data-id="${calibrationId}"]`).waitFor();
    check(await page.getByRole('link', { name: 'New calibration from a beam photo' }).isVisible(), 'a writer cannot see "New calibration"');
  });

  await step('a writer is not offered archiving nor the audit trail, and a 403 is explained', async () => {
    await page.goto(calibrationUrl);
    await page.locator('#cal-detail-name').filter({ hasText: /\S/ }).waitFor();
    check(await page.locator('#cal-archive').isHidden(), 'a writer is offered the archive button');
    check(await page.locator('#cal-audit').isHidden(), 'a writer is shown the audit trail');
    const message = await page.evaluate(async (id) => {
      const { api } = await import('/assets/api.js');
      try {
        await api.archive(id);
        return 'archived';
      } catch (e) {
        return e.message;
      }
    }, calibrationId);
    check(/signed in as lab-writer, with the role writer, which may not do this/.test(message), `unexpected 403 explanation: ${message}`);
  });

  await step('the token is kept for the tab: a reload asks for nothing', async () => {
    await page.reload();
    await page.getByText('Signed in as lab-writer · role writer').waitFor();
    check(!(await page.getByRole('dialog').isVisible()), 'the reload asked for the token again');
  });

  await step('after signing out, an admin signs in and sees the calibration’s audit rows', async () => {
    await page.getByRole('button', { name: 'Sign out' }).click();
    await page.getByRole('dialog', { name: 'Sign in with a token' }).waitFor();
    await signIn(page, adminToken);
    await page.getByText('Signed in as lab-admin · role admin').waitFor();
    await page.goto(calibrationUrl);
    const rows = page.locator('#cal-audit-rows tbody tr');
    await rows.first().waitFor();
    const first = await rows.first().textContent();
    check(/import/.test(first), `the audit row does not record the import: ${first}`);
    check(await page.locator('#cal-archive').isVisible(), 'an admin is not offered the archive button');
    check(await whoText(page) === 'Signed in as lab-admin · role admin', `who: ${await whoText(page)}`);
    await shot(page, 'token-mode-admin');
  });

  await step('the calibration file downloads with the token (a plain link could not send it)', async () => {
    const [download] = await Promise.all([
      page.waitForEvent('download'),
      page.getByRole('link', { name: 'Download calibration file' }).click(),
    ]);
    const table = JSON.parse(fs.readFileSync(await download.path(), 'utf8'));
    check(table.format === 'isotint-calibration', `the download is not a calibration file: ${JSON.stringify(table).slice(0, 80)}`);
  });

  await step('the page raised no script errors', async () => {
    check(problems.length === 0, problems.join('\n'));
  });
}

await run('token mode', main);
