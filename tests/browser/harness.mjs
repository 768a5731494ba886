// What the browser scripts share: Debian's headless Chromium through playwright-core, steps
// that print one line each, and a closing "N passed, N failed" with the exit code.

import { chromium } from 'playwright-core';
import os from 'node:os';
import path from 'node:path';

const CHROMIUM = process.env.CHROMIUM || '/usr/bin/chromium';
const SHOTS = process.env.WORKBENCH_SCREENSHOTS || os.tmpdir();
export const STEP_TIMEOUT = 120_000;

let passed = 0;
let failed = 0;

// Runs one step; prints "ok - NAME" or "not ok - NAME" with the error, which it rethrows.
export async function step(name, body) {
  const started = Date.now();
  try {
    await body();
    passed += 1;
    console.log(`ok - ${name} (${Date.now() - started} ms)`);
  } catch (error) {
    failed += 1;
    console.log(`not ok - ${name}\n  ${String(error?.stack || error).replace(/\n/g, '\n  ')}`);
    throw Object.assign(error instanceof Error ? error : new Error(String(error)), { reported: true });
  }
}

export function check(condition, message) {
  if (!condition) throw new Error(message);
}

// A screenshot of the whole page into $WORKBENCH_SCREENSHOTS (default: the temp directory).
export async function shot(page, name) {
  const file = path.join(SHOTS, `isotint-workbench-${name}.png`);
  await page.screenshot({ path: file, fullPage: true });
  console.log(`# screenshot ${file}`);
}

// Runs `main(browser)` in a fresh headless Chromium, then prints "LABEL: N passed, N failed" and
// sets the exit code (0 only when every step passed).
export async function run(label, main) {
  try {
    const browser = await chromium.launch({
      executablePath: CHROMIUM,
      headless: true,
      args: [
        '--headless',
        '--no-sandbox',
        '--disable-gpu',
        '--disable-quic',
        '--no-first-run',
        '--disable-background-networking',
        '--disable-component-update',
        '--disable-sync',
      ],
    });
    try {
      await main(browser);
    } finally {
      await browser.close();
    }
  } catch (error) {
    if (!error.reported) {
      failed += 1;
      console.log(`not ok - setting up the browser\n  ${error?.stack || error}`);
    }
  } finally {
    console.log(`${label}: ${passed} passed, ${failed} failed`);
    process.exitCode = failed === 0 && passed > 0 ? 0 : 1;
  }
}
