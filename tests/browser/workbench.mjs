// Drives the isotint workbench in Debian's headless Chromium, as a person would:
// make a calibration from the demo beam photo by dragging the constant-moment zone (check the
// fit, then save), analyse the demo disc photo with it, read a value by hovering, draw a profile
// line and download the NPY map, whose shape must equal the photo's (height, width).
//
// Usage: node workbench.mjs BASE_URL DEMO_DIR
// Screenshots go to $WORKBENCH_SCREENSHOTS (default: the system's temp directory).
// Exits 0 when every step passed; prints one line per step and a closing "N passed, N failed".

import { chromium } from 'playwright-core';
import fs from 'node:fs';
import os from 'node:os';
import path from 'node:path';

const [baseUrl, demoDir] = process.argv.slice(2);
if (!baseUrl || !demoDir) {
  console.error('usage: node workbench.mjs BASE_URL DEMO_DIR');
  process.exit(2);
}
const CHROMIUM = process.env.CHROMIUM || '/usr/bin/chromium';
const SHOTS = process.env.WORKBENCH_SCREENSHOTS || os.tmpdir();
const STEP_TIMEOUT = 120_000;
const PHOTO = /\.(png|jpe?g|tiff?)$/i;

let passed = 0;
let failed = 0;

async function step(name, body) {
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

function check(condition, message) {
  if (!condition) throw new Error(message);
}

// The demo photo whose file name contains `word` (beam, disc).
function demoPhoto(word) {
  const files = fs.readdirSync(demoDir).filter((f) => PHOTO.test(f) && f.toLowerCase().includes(word));
  check(files.length > 0, `no ${word} photo (png, jpeg or tiff with "${word}" in its name) in ${demoDir}`);
  files.sort((a, b) => a.length - b.length);
  return path.join(demoDir, files[0]);
}

// Reads the shape of a 2-D NPY file: [rows, cols].
function npyShape(bytes) {
  check(bytes.subarray(1, 6).toString('latin1') === 'NUMPY', 'the download is not an NPY file');
  const headerLength = bytes.readUInt16LE(8);
  const header = bytes.subarray(10, 10 + headerLength).toString('latin1');
  check(header.includes("'descr': '<f4'"), `unexpected NPY element type in ${header.trim()}`);
  const shape = /'shape':\s*\((\d+),\s*(\d+)\)/.exec(header);
  check(shape, `no 2-D shape in NPY header ${header.trim()}`);
  const [rows, cols] = [Number(shape[1]), Number(shape[2])];
  check(bytes.length - 10 - headerLength === rows * cols * 4, 'NPY data length does not match its shape');
  return [rows, cols];
}

// Finds the beam in a dark-field photo: its upper and lower edges are the first and last bright
// rows of the middle column (the mid-line is dark too, the edges are bright), and the middle
// fifth of its bright length is taken as the constant-moment zone. Runs in the page, which can
// decode the photo.
async function findBeam(page, file) {
  const base64 = fs.readFileSync(file).toString('base64');
  return page.evaluate(async (data) => {
    const bytes = Uint8Array.from(atob(data), (c) => c.charCodeAt(0));
    const bitmap = await createImageBitmap(new Blob([bytes]), { imageOrientation: 'none' });
    const canvas = new OffscreenCanvas(bitmap.width, bitmap.height);
    const ctx = canvas.getContext('2d');
    ctx.drawImage(bitmap, 0, 0);
    const { data: px, width, height } = ctx.getImageData(0, 0, bitmap.width, bitmap.height);
    const bright = (x, y) => {
      const i = (y * width + x) * 4;
      return Math.max(px[i], px[i + 1], px[i + 2]) > 60;
    };
    const mid = Math.floor(width / 2);
    let top = -1;
    let bottom = -1;
    for (let y = 0; y < height; y += 1) {
      if (bright(mid, y)) {
        if (top < 0) top = y;
        bottom = y + 1;
      }
    }
    if (top < 0) return null;
    const row = Math.min(height - 1, top + 1);
    let left = mid;
    let right = mid;
    while (left > 0 && bright(left - 1, row)) left -= 1;
    while (right < width && bright(right, row)) right += 1;
    const length = right - left;
    return {
      width,
      height,
      region: { left: Math.round(left + 0.4 * length), top, right: Math.round(left + 0.6 * length), bottom },
    };
  }, base64);
}

// Screen position of an image point on a view canvas (image coordinates in pixels).
async function screenPoint(canvas, size, p) {
  const box = await canvas.boundingBox();
  return { x: box.x + (p.x / size.width) * box.width, y: box.y + (p.y / size.height) * box.height };
}

async function shot(page, name) {
  const file = path.join(SHOTS, `isotint-workbench-${name}.png`);
  await page.screenshot({ path: file, fullPage: true });
  console.log(`# screenshot ${file}`);
}

async function main() {
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
  const problems = [];
  try {
    const context = await browser.newContext({ viewport: { width: 1366, height: 768 }, acceptDownloads: true });
    const page = await context.newPage();
    page.setDefaultTimeout(STEP_TIMEOUT);
    page.on('pageerror', (e) => problems.push(`page error: ${e.message}`));
    page.on('console', (m) => m.type() === 'error' && problems.push(`console error: ${m.text()}`));
    // The page must load nothing from other hosts.
    page.on('request', (r) => {
      if (!r.url().startsWith(baseUrl) && !/^(blob|data):/.test(r.url())) problems.push(`request to ${r.url()}`);
    });

    const beamFile = demoPhoto('beam');
    const discFile = demoPhoto('disc');
    const calibrationName = `Browser test beam ${Date.now()}`;

    await step('the workbench opens with its caution and both pages', async () => {
      await page.goto(baseUrl);
      await page.getByRole('navigation').getByRole('link', { name: 'Calibrations' }).waitFor();
      await page.getByRole('navigation').getByRole('link', { name: 'Analyse a photo' }).waitFor();
      const caution = await page.getByRole('note').textContent();
      check(/do not replace/.test(caution), `caution text missing: ${caution}`);
      await shot(page, '1-calibrations');
    });

    const cal = page.locator('#page-calibrations');
    const an = page.locator('#page-analyse');

    await step('a calibration is made from the beam photo by dragging its zone', async () => {
      await page.getByRole('link', { name: /New calibration/ }).click();
      await cal.getByLabel('Beam photo (PNG, JPEG or TIFF)').setInputFiles(beamFile);
      const beam = await findBeam(page, beamFile);
      check(beam, `no bright beam found in ${beamFile}`);
      const view = page.locator('#cf-view');
      await page.getByText(`Photo ${beam.width} × ${beam.height} px`).waitFor();
      const { region } = beam;
      const a = await screenPoint(view, beam, { x: region.left, y: region.top });
      const b = await screenPoint(view, beam, { x: region.right, y: region.bottom });
      await page.mouse.move(a.x, a.y);
      await page.mouse.down();
      await page.mouse.move((a.x + b.x) / 2, (a.y + b.y) / 2, { steps: 4 });
      await page.mouse.move(b.x, b.y, { steps: 4 });
      await page.mouse.up();
      const typed = await Promise.all(['Left', 'Top edge', 'Right', 'Bottom edge'].map((l) => cal.getByLabel(l, { exact: true }).inputValue()));
      check(typed.every((v) => v !== '' && Number.isFinite(Number(v))), `zone fields not filled by the drag: ${typed}`);
      check(Number(typed[2]) > Number(typed[0]) && Number(typed[3]) > Number(typed[1]), `zone is empty: ${typed}`);
      await cal.getByLabel('Edge fringe order').fill(process.env.DEMO_EDGE_ORDER || '3');
      await cal.getByLabel('Name', { exact: true }).fill(calibrationName);
      await cal.getByLabel('Material', { exact: true }).fill('demo model material');
      check(await cal.getByRole('button', { name: 'Save calibration' }).isDisabled(), 'saving is possible before the fit was checked');
      await cal.getByRole('button', { name: /Check the fit/ }).click();
      const error = page.locator('#cf-error');
      await Promise.race([
        page.locator('#cf-report').waitFor({ state: 'visible' }),
        error.waitFor({ state: 'visible' }).then(async () => {
          throw new Error(`the dry run failed: ${await error.textContent()}`);
        }),
      ]);
      const residual = await page.locator('#cf-report-values dt:text("Mean residual") + dd').textContent();
      check(/\d/.test(residual), `no residual shown: ${residual}`);
      console.log(`# dry-run residual: ${residual}`);
      await shot(page, '2-new-calibration-checked');
      await cal.getByRole('button', { name: 'Save calibration' }).click();
      await page.waitForURL(/#\/calibrations\/[^/]+$/);
      await page.locator('#cal-detail-name', { hasText: calibrationName }).waitFor();
      await page.locator('#cal-list a', { hasText: calibrationName }).waitFor();
      await shot(page, '3-calibration-detail');
    });

    let discSize;
    await step('the disc photo is analysed with the new calibration', async () => {
      await page.getByRole('navigation').getByRole('link', { name: 'Analyse a photo' }).click();
      await an.getByLabel('1. Photo of the specimen').setInputFiles(discFile);
      await page.getByText(/^Photo \d+ × \d+ px\.$/).waitFor();
      const text = await page.locator('#an-readout').textContent();
      const [, w, h] = /Photo (\d+) × (\d+)/.exec(text);
      discSize = { width: Number(w), height: Number(h) };
      const select = an.getByLabel('2. Calibration');
      await select.locator('option', { hasText: calibrationName }).waitFor({ state: 'attached' });
      const value = await select.locator('option', { hasText: calibrationName }).getAttribute('value');
      await select.selectOption(value);
      await an.getByLabel('Material fringe value (N/mm per fringe)').fill('11');
      await an.getByLabel('Thickness (mm)', { exact: true }).fill('6');
      await an.getByRole('button', { name: 'Make the fringe-order map' }).click();
      const error = page.locator('#an-error');
      await Promise.race([
        page.locator('#an-results').waitFor({ state: 'visible' }),
        error.waitFor({ state: 'visible' }).then(async () => {
          throw new Error(`the analysis failed: ${await error.textContent()}`);
        }),
      ]);
      await page.locator('#an-legend').waitFor({ state: 'visible' });
    });

    await step('hovering the map shows the fringe order (or names the flag) at the cursor', async () => {
      const view = page.locator('#an-view');
      let readout = '';
      // Try a few points from the centre outwards until one has a value.
      for (const [fx, fy] of [[0.5, 0.5], [0.4, 0.5], [0.5, 0.35], [0.6, 0.6], [0.3, 0.3]]) {
        const p = await screenPoint(view, discSize, { x: fx * discSize.width, y: fy * discSize.height });
        await page.mouse.move(p.x, p.y);
        readout = await page.locator('#an-readout').textContent();
        if (/fringe order \d/.test(readout)) break;
      }
      check(/^Pixel \(\d+, \d+\): /.test(readout), `no hover readout: ${readout}`);
      console.log(`# hover: ${readout}`);
      if (/fringe order \d/.test(readout)) check(/MPa/.test(readout), `no stress in the readout: ${readout}`);
    });

    await step('a profile line is drawn across the map', async () => {
      await an.getByLabel('Profile line').check();
      const view = page.locator('#an-view');
      const a = await screenPoint(view, discSize, { x: 0.1 * discSize.width, y: 0.5 * discSize.height });
      const b = await screenPoint(view, discSize, { x: 0.9 * discSize.width, y: 0.5 * discSize.height });
      await page.mouse.move(a.x, a.y);
      await page.mouse.down();
      await page.mouse.move(b.x, b.y, { steps: 6 });
      await page.mouse.up();
      await page.locator('#an-profile-figure').waitFor({ state: 'visible' });
      const caption = await page.locator('#an-profile-caption').textContent();
      check(/along the line/.test(caption), `no profile caption: ${caption}`);
      await shot(page, '4-order-map');
    });

    await step('the NPY download has the photo’s shape (height, width)', async () => {
      const [download] = await Promise.all([page.waitForEvent('download'), page.getByRole('link', { name: 'Orders (NPY)' }).click()]);
      const file = path.join(fs.mkdtempSync(path.join(os.tmpdir(), 'isotint-npy-')), download.suggestedFilename());
      await download.saveAs(file);
      const [rows, cols] = npyShape(fs.readFileSync(file));
      check(rows === discSize.height && cols === discSize.width, `NPY shape (${rows}, ${cols}) but the photo is ${discSize.width} × ${discSize.height}`);
      console.log(`# npy shape (${rows}, ${cols})`);
    });

    await step('the page logged no errors and loaded nothing from elsewhere', async () => {
      check(problems.length === 0, problems.join('\n'));
    });
  } finally {
    await browser.close();
  }
}

try {
  await main();
} catch (error) {
  if (!error.reported) {
    failed += 1;
    console.log(`not ok - setting up the browser\n  ${error?.stack || error}`);
  }
} finally {
  console.log(`workbench: ${passed} passed, ${failed} failed`);
  process.exitCode = failed === 0 && passed > 0 ? 0 : 1;
}
