// The "Analyse a photo" page: photo, calibration, optional outline or mask, optional points of
// known order; the fringe-order map in false colour with hover values, flags, a profile along a
// line and the downloads.

import { api, getBytes } from './api.js';
import { $, showError, fillDl, requiredNumber, progress } from './dom.js';
import { ImageView, TwoPointGesture, decodeImage, tracePath, strokeBoth, marker } from './view.js';
import { drawColourBar, drawProfile, fmt } from './plot.js';
import { cividis, flagOf, scaleTop, FLAGS } from './colour.js';

const UNRELIABLE = FLAGS.find((f) => f.bit === 4);
import { parseNpy } from './npy.js';
import { CHANGED } from './calibrations.js';

const TOOL_HELP = {
  inspect: 'Point at the picture, or focus it and use the arrow keys, to read the fringe order.',
  outline: 'Click (or press Enter) at each corner of the specimen outline; click the first corner again or press “Close outline” to finish. Backspace removes the last corner.',
  hint: 'Click (or press Enter) where the fringe order is known, then type the order and press “Add point”.',
  line: 'Drag a line, or click (Enter) at its two ends, to plot the fringe order along it.',
};

// Width (CSS pixels) of the colour bar and flag key beside the map, with its gap.
const LEGEND_WIDTH = 180;
// On narrow screens (phones) the colour bar and flag key go below the map (style.css).
const NARROW = window.matchMedia('(max-width: 560px)');

// Screen distance (CSS pixels) within which a click closes the outline on its first corner.
const CLOSE_DISTANCE = 10;

// " ± σ" with `digits` decimals, or nothing while the uncertainty is unknown (NaN).
function plusMinus(sigma, digits) {
  return Number.isFinite(sigma) ? ` ± ${fmt(sigma, digits)}` : '';
}

// A photo's file name without its extension, as the service accepts it for a file name (at most
// 80 letters, digits, '.', '_', '-', not starting with '.'): downloads are named after the photo
// ("disc-03.jpg" → "disc-03-orders.npy").
export function photoStem(name) {
  const stem = name.replace(/\.[^.]*$/, '').replace(/[^A-Za-z0-9._-]+/g, '_').replace(/^\.+/, '').slice(0, 80);
  return stem || 'photo';
}

// How the specimen of a map was chosen, in words.
function maskText(mask) {
  const share = `${fmt(mask.specimen_share * 100, 1)} % of the photo`;
  const source = { given: 'your mask', found: 'found from the photo', whole_photo: 'the whole photo' }[mask.source] ?? mask.source;
  return `${source}, ${share}`;
}

// The note under a map whose specimen was found from the photo, or none.
function showMaskNote(mask) {
  const found = mask?.source === 'found';
  $('an-mask-note').hidden = !found;
  if (!found) return;
  $('an-mask-note-text').textContent =
    `The specimen was found from the photo: ${fmt(mask.specimen_share * 100, 1)} % of its pixels, ` +
    'outlined in yellow on the photo, what was left out shaded blue. Shares and figures count the specimen only. ' +
    'Zero-order zones on the specimen’s edge (an unloaded end, a stress-free rim) look like the background and are left out too; ' +
    'if that is wrong, draw an outline, give a mask file, or use the whole photo.';
}

// A picture of the found specimen at the photo's size: what was left out shaded blue, the
// specimen's edge pixels yellow (from the map's flags, bit 1 = outside the mask).
function foundMaskPicture(flags, width, height) {
  const outside = (x, y) => x >= 0 && y >= 0 && x < width && y < height && (flags[y * width + x] & 1) !== 0;
  return picture(width, height, (px) => {
    for (let y = 0; y < height; y += 1) {
      for (let x = 0; x < width; x += 1) {
        const o = (y * width + x) * 4;
        if (outside(x, y)) {
          px.set([40, 110, 255, 90], o);
        } else if (outside(x - 1, y) || outside(x + 1, y) || outside(x, y - 1) || outside(x, y + 1)) {
          px.set([255, 214, 10, 255], o);
        }
      }
    }
  });
}

// A canvas of `width` × `height` whose RGBA bytes `paint(px)` fills (transparent to begin with).
function picture(width, height, paint) {
  const canvas = document.createElement('canvas');
  canvas.width = width;
  canvas.height = height;
  const ctx = canvas.getContext('2d');
  const image = ctx.createImageData(width, height);
  paint(image.data);
  ctx.putImageData(image, 0, 0);
  return canvas;
}

export class AnalysisPage {
  constructor() {
    // Room is kept beside the picture for the colour bar, so that both layers share one size.
    this.view = new ImageView($('an-view'), {
      maxHeight: () => Math.max(260, window.innerHeight * 0.6),
      box: $('an-map-row'),
      reserve: () => (NARROW.matches ? 0 : LEGEND_WIDTH),
    });
    this.readout = $('an-readout');
    this.progress = progress($('an-progress'), $('an-progress-text'), 'Matching colours to fringe orders…');
    this.photo = null; // {file, bitmap, width, height}
    this.outline = { points: [], closed: false };
    this.hints = [];
    this.line = null; // {a, b}
    this.result = null; // {width, height, order, uncertainty, flags, canvas, top, id, found}
    this.wantedCalibration = '';

    this.view.overlay = (ctx, toScreen) => this.paintOverlay(ctx, toScreen);
    const lineGesture = new TwoPointGesture((a, b, done) => this.setLine(a, b, done));
    this.tools = {
      inspect: { hover: (p) => this.inspect(p) },
      outline: {
        hover: (p) => this.inspect(p),
        press: (p) => this.addCorner(p),
        undo: () => this.removeCorner(),
        cancel: () => this.clearOutline(),
      },
      hint: {
        hover: (p) => this.inspect(p),
        press: (p) => {
          $('an-hint-x').value = fmt(Math.floor(p.x) + 0.5, 1);
          $('an-hint-y').value = fmt(Math.floor(p.y) + 0.5, 1);
        },
        release: () => $('an-hint-order').focus(),
      },
      line: {
        hover: (p) => {
          lineGesture.hover(p);
          this.inspect(p);
        },
        press: (p) => lineGesture.press(p),
        drag: (p) => {
          lineGesture.drag(p);
          this.inspect(p);
        },
        release: (p) => lineGesture.release(p),
        cancel: () => lineGesture.cancel(),
      },
    };

    $('an-photo').addEventListener('change', () => this.loadPhoto());
    for (const radio of document.querySelectorAll('input[name="an-mask"]')) {
      radio.addEventListener('change', () => this.maskModeChanged());
    }
    for (const radio of document.querySelectorAll('input[name="an-tool"]')) {
      radio.addEventListener('change', () => this.toolChanged());
    }
    for (const radio of document.querySelectorAll('input[name="an-layer"]')) {
      radio.addEventListener('change', () => this.showLayer());
    }
    $('an-outline-clear').addEventListener('click', () => {
      if (this.closable()) this.outline.closed = true;
      else this.clearOutline();
      this.updateOutlineControls();
      this.view.draw();
    });
    $('an-hint-add').addEventListener('click', () => this.addHint());
    $('an-hint-order').addEventListener('keydown', (e) => {
      if (e.key === 'Enter') this.addHint();
    });
    for (const id of ['an-fringe-value', 'an-thickness']) {
      $(id).addEventListener('input', () => this.drawProfile());
    }
    $('an-run').addEventListener('click', () => this.run());
    $('an-whole-photo').addEventListener('click', () => {
      document.querySelector('input[name="an-mask"][value="none"]').checked = true;
      this.maskModeChanged();
      this.run();
    });
    document.addEventListener(CHANGED, () => this.loadCalibrations());
    new ResizeObserver(() => this.drawLegend()).observe($('an-view'));
    this.toolChanged();
    this.maskModeChanged();
  }

  show(params) {
    this.wantedCalibration = params.get('calibration') || '';
    if (!this.loaded) {
      this.loaded = true;
      this.loadCalibrations();
    } else if (this.wantedCalibration) {
      $('an-calibration').value = this.wantedCalibration;
    }
    this.view.fit();
  }

  async loadCalibrations() {
    const select = $('an-calibration');
    const keep = this.wantedCalibration || select.value;
    try {
      const calibrations = await api.allCalibrations();
      const placeholder = new Option(calibrations.length ? 'Choose a calibration…' : 'No calibrations yet: make one first', '');
      select.replaceChildren(
        placeholder,
        ...calibrations.map((c) => new Option(`${c.name}${c.material ? ` (${c.material})` : ''}, to N = ${fmt(c.max_order, 1)}`, c.id)),
      );
      select.value = calibrations.some((c) => c.id === keep) ? keep : '';
    } catch (e) {
      select.replaceChildren(new Option('Calibrations could not be loaded', ''));
      showError($('an-error'), e);
    }
  }

  async loadPhoto() {
    const file = $('an-photo').files[0];
    showError($('an-error'), null);
    this.clearResult();
    this.clearOutline();
    this.hints = [];
    this.renderHints();
    this.photo = null;
    this.view.setSource(null);
    if (!file) {
      this.readout.textContent = 'Load a photo to begin.';
      return;
    }
    try {
      const { bitmap, width, height } = await decodeImage(file);
      this.photo = { file, bitmap, width, height };
      this.setLayer('photo');
      this.readout.textContent = `Photo ${width} × ${height} px.`;
    } catch (e) {
      // The service may still read it (TIFF): it can be analysed, only not drawn on.
      this.photo = { file, bitmap: null, width: 0, height: 0 };
      this.readout.textContent = `${e.message} It can still be analysed without an outline.`;
    }
  }

  setLayer(layer) {
    const radio = document.querySelector(`input[name="an-layer"][value="${layer}"]`);
    radio.checked = true;
    this.showLayer();
  }

  showLayer() {
    const layer = document.querySelector('input[name="an-layer"]:checked').value;
    if (layer === 'map' && this.result) {
      this.view.setSource(this.result.canvas, this.result.width, this.result.height);
    } else if (this.photo?.bitmap) {
      this.view.setSource(this.photo.bitmap, this.photo.width, this.photo.height);
    }
    this.drawLegend();
  }

  toolChanged() {
    const tool = document.querySelector('input[name="an-tool"]:checked').value;
    this.view.setTool(this.tools[tool]);
    $('an-tool-help').textContent = TOOL_HELP[tool];
    this.updateOutlineControls();
  }

  maskModeChanged() {
    const mode = document.querySelector('input[name="an-mask"]:checked').value;
    $('an-mask-file-field').hidden = mode !== 'file';
    if (mode === 'polygon') {
      document.querySelector('input[name="an-tool"][value="outline"]').checked = true;
      this.toolChanged();
    }
    this.updateOutlineControls();
  }

  updateOutlineControls() {
    const polygonMode = document.querySelector('input[name="an-mask"]:checked').value === 'polygon';
    const { points, closed } = this.outline;
    const status = $('an-polygon-status');
    status.hidden = !polygonMode;
    status.textContent = closed
      ? `Outline closed, ${points.length} corners.`
      : points.length
        ? `${points.length} corner${points.length === 1 ? '' : 's'} so far; close the outline to use it.`
        : 'Choose the Outline tool and click around the specimen.';
    const button = $('an-outline-clear');
    button.hidden = points.length === 0;
    button.textContent = this.closable() ? 'Close outline' : 'Clear outline';
  }

  closable() {
    return !this.outline.closed && this.outline.points.length >= 3;
  }

  addCorner(p) {
    if (this.outline.closed) this.outline = { points: [], closed: false };
    const first = this.outline.points[0];
    const near = this.closable() && Math.hypot(first.x - p.x, first.y - p.y) * this.view.scale <= CLOSE_DISTANCE;
    if (near) this.outline.closed = true;
    else this.outline.points.push({ x: p.x, y: p.y });
    this.selectPolygonMask();
    this.updateOutlineControls();
  }

  selectPolygonMask() {
    const radio = document.querySelector('input[name="an-mask"][value="polygon"]');
    if (!radio.checked) {
      radio.checked = true;
      this.maskModeChanged();
    }
  }

  removeCorner() {
    if (this.outline.closed) this.outline.closed = false;
    else this.outline.points.pop();
    this.updateOutlineControls();
  }

  clearOutline() {
    this.outline = { points: [], closed: false };
    this.updateOutlineControls();
  }

  addHint() {
    showError($('an-error'), null);
    try {
      const x = requiredNumber($('an-hint-x'), { label: 'Known point x' });
      const y = requiredNumber($('an-hint-y'), { label: 'Known point y' });
      const order = requiredNumber($('an-hint-order'), { label: 'Known fringe order' });
      if (order < 0) throw new Error('Known fringe order: orders are zero or more.');
      if (this.photo?.bitmap && (x < 0 || y < 0 || x >= this.photo.width || y >= this.photo.height)) {
        throw new Error(`The point (${fmt(x, 1)}, ${fmt(y, 1)}) lies outside the ${this.photo.width} × ${this.photo.height} photo.`);
      }
      this.hints.push({ x, y, order });
      for (const id of ['an-hint-x', 'an-hint-y', 'an-hint-order']) $(id).value = '';
      this.renderHints();
      this.view.draw();
    } catch (e) {
      showError($('an-error'), e);
    }
  }

  renderHints() {
    $('an-hints').replaceChildren(
      ...this.hints.map((h, i) => {
        const li = document.createElement('li');
        li.textContent = `N = ${fmt(h.order, 2)} at (${fmt(h.x, 1)}, ${fmt(h.y, 1)})`;
        const remove = document.createElement('button');
        remove.type = 'button';
        remove.className = 'small';
        remove.textContent = 'Remove';
        remove.setAttribute('aria-label', `Remove the point of order ${fmt(h.order, 2)} at (${fmt(h.x, 1)}, ${fmt(h.y, 1)})`);
        remove.addEventListener('click', () => {
          this.hints.splice(i, 1);
          this.renderHints();
          this.view.draw();
          $('an-hint-x').focus();
        });
        li.append(' ', remove);
        return li;
      }),
    );
  }

  // MPa per fringe from the material fringe value and thickness (σ1 − σ2 = N·f/h), or null
  // while either is missing or not a positive number.
  stressPerOrder() {
    const [f, h] = ['an-fringe-value', 'an-thickness'].map((id) => $(id).valueAsNumber);
    return f > 0 && h > 0 ? f / h : null;
  }

  // The map's values at an image point: {x, y, order, sigma, flag} with pixel indices; sigma is
  // the order's standard uncertainty (1 σ, fringes), NaN where there is none.
  sample(p) {
    const r = this.result;
    const x = Math.floor(p.x);
    const y = Math.floor(p.y);
    if (!r || x < 0 || y < 0 || x >= r.width || y >= r.height) return { x, y, order: NaN, sigma: NaN, flag: undefined };
    const i = y * r.width + x;
    return { x, y, order: r.order[i], sigma: r.uncertainty[i], flag: flagOf(r.flags[i]) };
  }

  inspect(p) {
    if (!p) return;
    const s = this.sample(p);
    let text = `Pixel (${s.x}, ${s.y})`;
    if (this.result) {
      if (Number.isFinite(s.order)) {
        text += `: fringe order ${fmt(s.order, 3)}${plusMinus(s.sigma, 3)}`;
        const k = this.stressPerOrder();
        if (k !== null) text += `, σ1 − σ2 = ${fmt(s.order * k, 2)}${plusMinus(s.sigma * k, 2)} MPa`;
        if (s.flag) text += ` (${s.flag.text})`;
      } else {
        text += `: ${s.flag ? s.flag.text : 'no value'}`;
      }
    }
    this.readout.textContent = text;
  }

  setLine(a, b, done) {
    this.line = { a, b };
    if (done) this.drawProfile();
  }

  drawProfile() {
    const figure = $('an-profile-figure');
    if (!this.line || !this.result) {
      figure.hidden = true;
      return;
    }
    const { a, b } = this.line;
    const length = Math.hypot(b.x - a.x, b.y - a.y);
    const n = Math.max(2, Math.ceil(length) + 1);
    const samples = [];
    for (let i = 0; i < n; i += 1) {
      const t = i / (n - 1);
      const s = this.sample({ x: a.x + t * (b.x - a.x), y: a.y + t * (b.y - a.y) });
      samples.push({ distance: t * length, order: s.order, sigma: s.sigma });
    }
    figure.hidden = false;
    const valuedSamples = samples.filter((s) => Number.isFinite(s.order));
    const valued = valuedSamples.map((s) => s.order);
    const k = this.stressPerOrder();
    // The highest sample, whose σ1 − σ2 the caption quotes with its uncertainty.
    const peak = valuedSamples.reduce((best, s) => (s.order > best.order ? s : best), valuedSamples[0]);
    $('an-profile-caption').textContent =
      `Fringe order along the line from (${fmt(a.x, 0)}, ${fmt(a.y, 0)}) to (${fmt(b.x, 0)}, ${fmt(b.y, 0)}), ${fmt(length, 0)} px: ` +
      (valued.length
        ? `from ${fmt(Math.min(...valued))} to ${fmt(Math.max(...valued))}` +
          (k !== null ? ` (σ1 − σ2 up to ${fmt(peak.order * k, 1)}${plusMinus(peak.sigma * k, 1)} MPa)` : '')
        : 'no values on this line');
    const canvas = $('an-profile');
    canvas.setAttribute('aria-label', $('an-profile-caption').textContent);
    drawProfile(canvas, samples, k);
  }

  paintOverlay(ctx, toScreen) {
    // The specimen found from the photo, for confirmation: drawn over the photo only (the map
    // shows the pixels left out in their own colour).
    const found = this.result?.found;
    const onPhoto = document.querySelector('input[name="an-layer"]:checked').value === 'photo';
    if (found && onPhoto) {
      const end = toScreen({ x: this.result.width, y: this.result.height });
      ctx.save();
      ctx.imageSmoothingEnabled = false;
      ctx.drawImage(found, 0, 0, end.x, end.y);
      ctx.restore();
    }
    const { points, closed } = this.outline;
    if (points.length) {
      tracePath(ctx, toScreen, points, closed);
      strokeBoth(ctx);
      if (!closed) marker(ctx, toScreen, points[0], CLOSE_DISTANCE * 0.6);
    }
    for (const h of this.hints) {
      marker(ctx, toScreen, h, 6, '#7ee0ff');
      const s = toScreen(h);
      ctx.font = 'bold 13px system-ui, sans-serif';
      ctx.lineWidth = 3;
      ctx.strokeStyle = '#000';
      ctx.strokeText(fmt(h.order, 2), s.x + 9, s.y - 7);
      ctx.fillStyle = '#fff';
      ctx.fillText(fmt(h.order, 2), s.x + 9, s.y - 7);
    }
    if (this.line) {
      tracePath(ctx, toScreen, [this.line.a, this.line.b], false);
      strokeBoth(ctx, 2, '#ff8a3d');
      marker(ctx, toScreen, this.line.a, 3, '#ff8a3d');
    }
  }

  drawLegend() {
    const legend = $('an-legend');
    const showing = this.result && document.querySelector('input[name="an-layer"]:checked').value === 'map';
    legend.hidden = !showing;
    if (!showing) return;
    const bar = $('an-colourbar');
    bar.style.height = `${Math.max(200, $('an-view').clientHeight - 110)}px`;
    drawColourBar(bar, this.result.top);
  }

  clearResult() {
    this.result = null;
    this.line = null;
    $('an-results').hidden = true;
    $('an-mask-note').hidden = true;
    $('an-profile-figure').hidden = true;
    const mapRadio = document.querySelector('input[name="an-layer"][value="map"]');
    mapRadio.disabled = true;
    this.setLayer('photo');
  }

  async maskBlob() {
    const mode = document.querySelector('input[name="an-mask"]:checked').value;
    if (mode === 'file') {
      const file = $('an-mask-file').files[0];
      if (!file) {
        $('an-mask-file').focus();
        throw new Error('Choose the mask file, or pick “Whole photo”.');
      }
      return file;
    }
    if (mode !== 'polygon') return null; // 'find' and 'none' send no mask
    const { points, closed } = this.outline;
    if (!closed || points.length < 3) {
      $('an-view').focus();
      throw new Error('Close the specimen outline first (at least three corners), or pick “Whole photo”.');
    }
    // Rasterise the outline at the photo's size: white (non-zero) inside, black outside.
    const canvas = document.createElement('canvas');
    canvas.width = this.photo.width;
    canvas.height = this.photo.height;
    const ctx = canvas.getContext('2d');
    ctx.fillStyle = '#000';
    ctx.fillRect(0, 0, canvas.width, canvas.height);
    tracePath(ctx, (p) => p, points, true);
    ctx.fillStyle = '#fff';
    ctx.fill();
    return new Promise((resolve, reject) =>
      canvas.toBlob((blob) => (blob ? resolve(blob) : reject(new Error('The outline could not be turned into a mask.'))), 'image/png'),
    );
  }

  async run() {
    const error = $('an-error');
    showError(error, null);
    const button = $('an-run');
    let form;
    try {
      if (!this.photo) {
        $('an-photo').focus();
        throw new Error('Choose a photo first.');
      }
      const calibration = $('an-calibration').value;
      if (!calibration) {
        $('an-calibration').focus();
        throw new Error('Choose a calibration.');
      }
      form = new FormData();
      form.append('photo', this.photo.file, this.photo.file.name);
      form.append('calibration', calibration);
      const mask = await this.maskBlob();
      if (mask) form.append('mask', mask, 'mask.png');
      const mode = document.querySelector('input[name="an-mask"]:checked').value;
      if (mode === 'none') form.append('specimen', 'whole_photo');
      form.append(
        'options',
        JSON.stringify({ hints: this.hints, exposure_compensation: $('an-exposure').checked, max_order: null }),
      );
    } catch (e) {
      this.clearResult();
      showError(error, e);
      return;
    }
    button.disabled = true;
    try {
      const answer = await api.createOrderMap(form, (f) => this.progress.report(f));
      this.progress.report(null);
      $('an-progress-text').textContent = 'Fetching the map…';
      const files = await Promise.all([answer.links.npy, answer.links.flags, answer.links.uncertainty].map(getBytes));
      const [orders, flags, uncertainty] = files.map(parseNpy);
      this.showResult(answer, orders, flags, uncertainty);
      this.progress.done(`Map ready: ${answer.width} × ${answer.height} px.`);
    } catch (e) {
      // No result of an earlier run stays beside the error: it would read as this one's.
      this.clearResult();
      this.progress.done();
      showError(error, e);
    } finally {
      button.disabled = false;
    }
  }

  showResult(answer, orders, flags, uncertainty) {
    const [height, width] = orders.shape;
    const sameSize = (npy) => npy.shape[0] === height && npy.shape[1] === width;
    if (width !== answer.width || height !== answer.height || !sameSize(flags) || !sameSize(uncertainty)) {
      throw new Error(`The map files do not match the reported size ${answer.width} × ${answer.height}.`);
    }
    const top = scaleTop(answer.statistics.max_order);
    const canvas = picture(width, height, (px) => {
      for (let i = 0; i < width * height; i += 1) {
        // Flagged pixels wear their flag's colour; a missing value without a flag counts as unreliable.
        const flag = flagOf(flags.data[i]) ?? (Number.isFinite(orders.data[i]) ? null : UNRELIABLE);
        const rgb = flag ? flag.rgb : cividis(orders.data[i] / top);
        const o = i * 4;
        px[o] = rgb[0];
        px[o + 1] = rgb[1];
        px[o + 2] = rgb[2];
        px[o + 3] = 255;
      }
    });
    const found = answer.mask?.source === 'found' ? foundMaskPicture(flags.data, width, height) : null;
    this.result = { width, height, order: orders.data, uncertainty: uncertainty.data, flags: flags.data, canvas, top, id: answer.id, found };
    showMaskNote(answer.mask);

    const caution = $('an-caution');
    caution.textContent = answer.caution ?? '';
    caution.hidden = !answer.caution;
    const st = answer.statistics;
    const share = (v) => `${fmt(v * 100, 1)} %`;
    fillDl($('an-stats'), [
      ['Fringe order', `${fmt(st.min_order)} to ${fmt(st.max_order)} (mean ${fmt(st.mean_order)})`],
      ['Pixels with a value', `${st.valued_pixels.toLocaleString()} of ${st.specimen_pixels.toLocaleString()}`],
      ['Beyond range', share(st.beyond_range_share)],
      ['Unreliable', share(st.unreliable_share)],
      ['Specimen', answer.mask ? maskText(answer.mask) : ''],
      ['Mean colour residual', `${fmt(st.mean_residual, 1)} ΔE00 (CIEDE2000; below 2 good, above 3 poor)`],
      ['Exposure gain (R, G, B)', answer.exposure?.gain?.map((g) => fmt(g, 2)).join(', ')],
    ]);
    // Files are saved under the photo's name (the service names them by `?name=`, so that a
    // download fetched with a token is saved under the same name).
    const base = `${photoStem(this.photo.file.name)}-orders`;
    for (const [key, suffix] of [['npy', '.npy'], ['png16', '.png'], ['csv', '.csv'], ['preview', '.preview.png'], ['uncertainty', '-uncertainty.npy']]) {
      const link = $(`an-dl-${key}`);
      link.href = `${answer.links[key]}?${new URLSearchParams({ name: base })}`;
      link.download = base + suffix;
    }
    $('an-results').hidden = false;
    document.querySelector('input[name="an-layer"][value="map"]').disabled = false;
    this.setLayer('map');
    this.drawProfile();
  }
}
