// The "Analyse a photo" page: photo, calibration, optional outline or mask, optional points of
// known order; the fringe-order map in false colour with hover values, flags, a profile along a
// line and the downloads. With a material fringe value and thickness: the σ1 − σ2 layer, its
// figures and files, the free-edge stress along the outline (K_t with a nominal stress) and a
// comparison with a finite-element prediction. With a scale (mm per pixel), lengths and
// positions are given in mm beside pixels.

import { api, getBytes } from './api.js';
import { $, showError, fillDl, numberIn, requiredNumber, progress } from './dom.js';
import { ImageView, TwoPointGesture, decodeImage, tracePath, strokeBoth, marker } from './view.js';
import { drawColourBar, drawProfile, fmt } from './plot.js';
import { cividis, diverging, flagOf, niceTop, scaleTop, FLAGS } from './colour.js';
import { parseNpy } from './npy.js';
import { CHANGED } from './calibrations.js';

const UNRELIABLE = FLAGS.find((f) => f.bit === 4);
// Colour of specimen pixels the prediction does not cover, on the difference layer.
const NOT_COMPARED = [150, 150, 150];
// The stress-optic law's inputs: field id, the calibration's key, label and unit.
const MATERIAL_FIELDS = [
  ['an-fringe-value', 'fringe_value_n_per_mm', 'Fringe value', 'N/mm per fringe'],
  ['an-thickness', 'thickness_mm', 'Thickness', 'mm'],
];

const TOOL_HELP = {
  inspect: 'Point at the picture, or focus it and use the arrow keys, to read the fringe order.',
  outline: 'Click (or press Enter) at each corner of the specimen outline; click the first corner again or press “Close outline” to finish. Backspace removes the last corner.',
  hint: 'Click (or press Enter) where the fringe order is known, then type the order and press “Add point”.',
  line: 'Drag a line, or click (Enter) at its two ends, to plot the fringe order along it.',
  scale: 'Drag a line, or click (Enter) at its two ends, between two points a known distance apart; then type the distance under “Scale” and set it.',
  pair: 'Click (or press Enter) on a point whose model coordinates you know; then type them under “Comparison” and add the pair.',
};

// The note beside every maximum that may be exceeded in beyond-range pixels.
const LOWER_BOUND_NOTE =
  "Part of the specimen lies beyond the calibration's range, where no value can be read: the true maximum may lie there, so this maximum is only a lower bound.";

// A maximum as text: the value, or "at least" the value when it is only a lower bound.
function maximum(value, digits, unit, lowerBound) {
  const text = `${fmt(value, digits)}${unit ? ` ${unit}` : ''}`;
  return lowerBound ? `at least ${text} (a lower bound)` : text;
}

// Shows or hides the lower-bound note `el`.
function lowerBoundNote(el, lowerBound) {
  el.hidden = !lowerBound;
  el.textContent = lowerBound ? LOWER_BOUND_NOTE : '';
}

// "(12.3 mm)" for `px` pixels at `mmPerPx`, or nothing without a scale.
function inMm(px, mmPerPx, digits = 1) {
  return mmPerPx ? ` (${fmt(px * mmPerPx, digits)} mm)` : '';
}

// Paints one value per pixel into a canvas: flagged pixels wear their flag's colour, values
// that are not numbers `missing` (by default the unreliable flag's), others `colourOf(value)`.
function paintLayer(width, height, values, flags, colourOf, missing = UNRELIABLE.rgb) {
  const canvas = document.createElement('canvas');
  canvas.width = width;
  canvas.height = height;
  const ctx = canvas.getContext('2d');
  const image = ctx.createImageData(width, height);
  const px = image.data;
  for (let i = 0; i < width * height; i += 1) {
    const flag = flagOf(flags[i]);
    const rgb = flag ? flag.rgb : Number.isFinite(values[i]) ? colourOf(values[i]) : missing;
    const o = i * 4;
    px[o] = rgb[0];
    px[o + 1] = rgb[1];
    px[o + 2] = rgb[2];
    px[o + 3] = 255;
  }
  ctx.putImageData(image, 0, 0);
  return canvas;
}

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
  const source = {
    given: 'your mask',
    found: 'found from the photo',
    found_with_light_field: 'found from the photo and its light-field photo',
    whole_photo: 'the whole photo',
  }[mask.source] ?? mask.source;
  return `${source}, ${share}`;
}

// The note under a map whose specimen was found from the photo, or none.
function showMaskNote(mask) {
  const helped = mask?.source === 'found_with_light_field';
  const found = helped || mask?.source === 'found';
  $('an-mask-note').hidden = !found;
  if (!found) return;
  $('an-mask-note-text').textContent =
    `The specimen was found from the photo${helped ? ' and its light-field photo' : ''}: ` +
    `${fmt(mask.specimen_share * 100, 1)} % of its pixels, ` +
    'outlined in yellow on the photo, what was left out shaded blue. Shares and figures count the specimen only. ' +
    (helped
      ? 'Zero-order zones on the specimen’s edge are kept where the light-field photo’s outline closes around them; '
      : 'Zero-order zones on the specimen’s edge (an unloaded end, a stress-free rim) look like the background and are left out too ' +
        '(a light-field photo of the same set-up keeps them); ') +
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
    this.result = null; // {width, height, order, uncertainty, flags, canvas, top, id, lowerBound, found}
    this.stressLayer = null; // {canvas, top, perOrder}
    this.difference = null; // {values, canvas, top, fringe_value_n_per_mm, thickness_mm}
    this.scaleLine = null; // {a, b}
    this.pairs = []; // [{x_px, y_px, x_mm, y_mm}]
    this.boundary = null; // the boundary answer, with its edge points
    this.pairPixel = null; // the pixel the point-pair tool picked
    this.wantedCalibration = '';
    this.lawTimer = null;

    this.view.overlay = (ctx, toScreen) => this.paintOverlay(ctx, toScreen);
    const lineGesture = new TwoPointGesture((a, b, done) => this.setLine(a, b, done));
    const scaleGesture = new TwoPointGesture((a, b) => this.setScaleLine(a, b));
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
      line: this.twoPointTool(lineGesture),
      scale: this.twoPointTool(scaleGesture),
      pair: {
        hover: (p) => this.inspect(p),
        press: (p) => {
          $('an-pair-xpx').value = p.x.toFixed(1);
          $('an-pair-ypx').value = p.y.toFixed(1);
          this.pairPixel = { x: p.x, y: p.y };
        },
        release: () => $('an-pair-xmm').focus(),
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
    for (const [id] of MATERIAL_FIELDS) {
      $(id).addEventListener('input', () => {
        delete $(id).dataset.from;
        this.materialNote();
        this.lawChanged();
      });
    }
    $('an-calibration').addEventListener('change', () => this.prefillMaterial());
    $('an-mm-per-px').addEventListener('input', () => this.scaleChanged());
    $('an-scale-set').addEventListener('click', () => this.applyScale());
    $('an-scale-distance').addEventListener('keydown', (e) => {
      if (e.key === 'Enter') this.applyScale();
    });
    $('an-boundary-run').addEventListener('click', () => this.runBoundary());
    $('an-pair-add').addEventListener('click', () => this.addPair());
    $('an-pair-ymm').addEventListener('keydown', (e) => {
      if (e.key === 'Enter') this.addPair();
    });
    $('an-compare-run').addEventListener('click', () => this.runComparison());
    $('an-run').addEventListener('click', () => this.run());
    $('an-report').addEventListener('click', () => this.report());
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

  // A tool that places two points with `gesture`, reading the map under the pointer meanwhile.
  twoPointTool(gesture) {
    return {
      hover: (p) => {
        gesture.hover(p);
        this.inspect(p);
      },
      press: (p) => gesture.press(p),
      drag: (p) => {
        gesture.drag(p);
        this.inspect(p);
      },
      release: (p) => gesture.release(p),
      cancel: () => gesture.cancel(),
    };
  }

  show(params) {
    this.wantedCalibration = params.get('calibration') || '';
    if (!this.loaded) {
      this.loaded = true;
      this.loadCalibrations();
    } else if (this.wantedCalibration) {
      $('an-calibration').value = this.wantedCalibration;
      this.prefillMaterial();
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
      this.calibrations = calibrations;
      this.prefillMaterial();
    } catch (e) {
      select.replaceChildren(new Option('Calibrations could not be loaded', ''));
      showError($('an-error'), e);
    }
  }

  // Fills in the fringe value and thickness stored with the chosen calibration, each unless
  // one was typed (a field filled from a calibration carries data-from="calibration").
  prefillMaterial() {
    const chosen = (this.calibrations || []).find((c) => c.id === $('an-calibration').value);
    for (const [id, key] of MATERIAL_FIELDS) {
      const input = $(id);
      if (input.value !== '' && input.dataset.from !== 'calibration') continue;
      const value = chosen ? chosen[key] : null;
      if (value > 0) {
        input.value = String(value);
        input.dataset.from = 'calibration';
      } else if (input.dataset.from === 'calibration') {
        input.value = '';
        delete input.dataset.from;
      }
    }
    this.materialNote(chosen);
    this.lawChanged();
  }

  // Says which of the fringe value and thickness came from the calibration, and which are
  // still to be typed.
  materialNote(chosen = (this.calibrations || []).find((c) => c.id === $('an-calibration').value)) {
    const from = MATERIAL_FIELDS.filter(([id]) => $(id).dataset.from === 'calibration')
      .map(([id, , label, unit]) => `${label} ${fmt($(id).valueAsNumber, 3)} ${unit}`);
    const missing = MATERIAL_FIELDS.filter(([id]) => $(id).value === '').map(([, , label]) => label.toLowerCase());
    let note = from.length && chosen ? `${from.join(' and ')} from the calibration “${chosen.name}”.` : '';
    if (from.length && missing.length) note += ` Type the ${missing.join(' and ')} (a load series gives the fringe value).`;
    $('an-material-source').textContent = note;
  }

  // The scale typed or set, mm per pixel, or null.
  mmPerPx() {
    const v = $('an-mm-per-px').valueAsNumber;
    return v > 0 ? v : null;
  }

  setScaleLine(a, b) {
    this.scaleLine = { a, b };
    const length = Math.hypot(b.x - a.x, b.y - a.y);
    $('an-scale-status').textContent = `Line of ${fmt(length, 1)} px between (${fmt(a.x, 1)}, ${fmt(a.y, 1)}) and (${fmt(b.x, 1)}, ${fmt(b.y, 1)}).`;
  }

  // Sets mm per pixel from the scale line and the known distance.
  applyScale() {
    const status = $('an-scale-status');
    try {
      if (!this.scaleLine) throw new Error('Draw the scale line first: pick the “Scale” tool and click two points a known distance apart.');
      const { a, b } = this.scaleLine;
      const length = Math.hypot(b.x - a.x, b.y - a.y);
      if (length < 1) throw new Error('The two points of the scale line coincide: pick points far apart.');
      const distance = requiredNumber($('an-scale-distance'), { positive: true, label: 'Known distance (mm)' });
      $('an-mm-per-px').value = String(Number((distance / length).toPrecision(6)));
      status.textContent = `${fmt(distance, 2)} mm over ${fmt(length, 1)} px: ${fmt(distance / length, 5)} mm per pixel.`;
      this.scaleChanged();
    } catch (e) {
      status.textContent = e.message;
    }
  }

  scaleChanged() {
    this.drawProfile();
    this.renderBoundary();
  }

  async loadPhoto() {
    const file = $('an-photo').files[0];
    showError($('an-error'), null);
    this.clearResult();
    this.clearOutline();
    this.hints = [];
    this.renderHints();
    this.pairs = [];
    this.pairPixel = null;
    this.renderPairs();
    this.scaleLine = null;
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

  layer() {
    return document.querySelector('input[name="an-layer"]:checked').value;
  }

  // The picture of a layer of the result: {canvas, top} with the top of its colour bar.
  layerPicture(layer) {
    if (!this.result) return null;
    if (layer === 'map') return this.result;
    if (layer === 'stress') return this.stressPicture();
    if (layer === 'difference') return this.difference;
    return null;
  }

  showLayer() {
    const picture = this.layerPicture(this.layer());
    if (picture) {
      this.view.setSource(picture.canvas, this.result.width, this.result.height);
    } else if (this.photo?.bitmap) {
      this.view.setSource(this.photo.bitmap, this.photo.width, this.photo.height);
    }
    this.drawLegend();
  }

  // The σ1 − σ2 layer through the current fringe value and thickness (made again when they
  // change), or null without them.
  stressPicture() {
    const k = this.stressPerOrder();
    if (k === null || !this.result) return null;
    if (this.stressLayer?.perOrder !== k) {
      const r = this.result;
      const top = niceTop(r.maxOrder * k);
      const stress = (n) => cividis((n * k) / top);
      this.stressLayer = { canvas: paintLayer(r.width, r.height, r.order, r.flags, stress), top, perOrder: k };
    }
    return this.stressLayer;
  }

  // The fringe value or thickness changed: the stress layer, readouts, figures and links follow.
  lawChanged() {
    this.drawProfile();
    const k = this.stressPerOrder();
    this.forgetStressResults(k);
    const radio = document.querySelector('input[name="an-layer"][value="stress"]');
    radio.disabled = !this.result || k === null;
    if (radio.disabled && radio.checked) this.setLayer('map');
    else if (radio.checked) this.showLayer();
    clearTimeout(this.lawTimer);
    this.lawTimer = setTimeout(() => this.updateStress(), 250);
  }

  // Forgets the edge stress and the comparison when they were made through another law than
  // `perOrder` (MPa per fringe), so that no figure on the page belongs to old inputs.
  forgetStressResults(perOrder) {
    const madeWith = (r) => r.fringe_value_n_per_mm / r.thickness_mm;
    if (this.boundary && madeWith(this.boundary) !== perOrder) {
      this.boundary = null;
      fillDl($('an-boundary-stats'), []);
      lowerBoundNote($('an-boundary-bound'), false);
      this.renderBoundary();
      this.view.draw();
    }
    if (this.difference && madeWith(this.difference) !== perOrder) {
      this.difference = null;
      fillDl($('an-compare-stats'), []);
      lowerBoundNote($('an-compare-bound'), false);
      const radio = document.querySelector('input[name="an-layer"][value="difference"]');
      radio.disabled = true;
      if (radio.checked) this.setLayer('map');
    }
  }

  // Asks the service for the map's σ1 − σ2 figures and files through the current law.
  async updateStress() {
    const error = $('an-stress-error');
    showError(error, null);
    const k = this.stressPerOrder();
    const have = Boolean(this.result) && k !== null;
    $('an-stress-needs').hidden = have;
    $('an-stress-downloads').hidden = !have;
    $('an-stress-caution').hidden = !have;
    if (!have) {
      fillDl($('an-stress-stats'), []);
      lowerBoundNote($('an-stress-bound'), false);
      return;
    }
    const [f, h] = ['an-fringe-value', 'an-thickness'].map((id) => $(id).valueAsNumber);
    const id = this.result.id;
    try {
      const answer = await api.stressOf(id, f, h);
      if (this.result?.id !== id || this.stressPerOrder() !== k) return; // changed meanwhile
      const st = answer.stress;
      $('an-stress-caution').textContent = `Caution: ${st.caution}.`;
      fillDl($('an-stress-stats'), [
        ['Law', `${fmt(f, 3)} N/mm ÷ ${fmt(h, 3)} mm = ${fmt(f / h, 4)} MPa per fringe`],
        ['Smallest σ1 − σ2', `${fmt(st.min_stress_mpa, 2)} MPa`],
        ['Mean σ1 − σ2', `${fmt(st.mean_stress_mpa, 2)} MPa`],
        ['Largest σ1 − σ2', maximum(st.max_stress_mpa, 2, 'MPa', st.max_is_lower_bound)],
      ]);
      lowerBoundNote($('an-stress-bound'), st.max_is_lower_bound);
      const base = `stress-${id}`;
      for (const [key, suffix] of [['npy', '.npy'], ['preview', '-preview.png'], ['csv', '.csv']]) {
        const link = $(`an-dl-stress-${key}`);
        link.href = st.links[key];
        link.download = base + suffix;
      }
    } catch (e) {
      showError(error, e);
    }
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
    $('an-light-field-field').hidden = mode !== 'find';
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
    const mm = this.mmPerPx();
    let text = `Pixel (${s.x}, ${s.y})${mm ? ` at (${fmt((s.x + 0.5) * mm, 2)}, ${fmt((s.y + 0.5) * mm, 2)}) mm` : ''}`;
    const d = this.difference && this.layer() === 'difference' ? this.difference.values[s.y * this.result.width + s.x] : NaN;
    if (this.result) {
      if (Number.isFinite(d)) text += `: measured − predicted ${fmt(d, 2)} MPa;`;
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
      samples.push({ distance: t * length, order: s.order, value: s.order, sigma: s.sigma });
    }
    figure.hidden = false;
    const valuedSamples = samples.filter((s) => Number.isFinite(s.order));
    const valued = valuedSamples.map((s) => s.order);
    const k = this.stressPerOrder();
    // The highest sample, whose σ1 − σ2 the caption quotes with its uncertainty.
    const peak = valuedSamples.reduce((best, s) => (s.order > best.order ? s : best), valuedSamples[0]);
    const mm = this.mmPerPx();
    const lowerBound = this.result.lowerBound;
    $('an-profile-caption').textContent =
      `Fringe order along the line from (${fmt(a.x, 0)}, ${fmt(a.y, 0)}) to (${fmt(b.x, 0)}, ${fmt(b.y, 0)}), ${fmt(length, 0)} px${inMm(length, mm)}: ` +
      (valued.length
        ? `from ${fmt(Math.min(...valued))} to ${lowerBound ? 'at least ' : ''}${fmt(Math.max(...valued))}` +
          (k !== null ? ` (largest σ1 − σ2 on the line ${lowerBound ? 'at least ' : ''}${fmt(peak.order * k, 2)}${plusMinus(peak.sigma * k, 2)} MPa)` : '') +
          (lowerBound ? `. ${LOWER_BOUND_NOTE}` : '')
        : 'no values on this line');
    const canvas = $('an-profile');
    canvas.setAttribute('aria-label', $('an-profile-caption').textContent);
    drawProfile(canvas, samples, { secondary: k !== null ? { perUnit: k, label: 'σ1 − σ2 (MPa)' } : null, mmPerPx: mm });
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
    if (this.scaleLine) {
      tracePath(ctx, toScreen, [this.scaleLine.a, this.scaleLine.b], false);
      strokeBoth(ctx, 2, '#7ee0ff');
      for (const p of [this.scaleLine.a, this.scaleLine.b]) marker(ctx, toScreen, p, 3, '#7ee0ff');
    }
    const label = (p, words, colour) => {
      const s = toScreen(p);
      ctx.font = 'bold 13px system-ui, sans-serif';
      ctx.lineWidth = 3;
      ctx.strokeStyle = '#000';
      ctx.strokeText(words, s.x + 10, s.y - 8);
      ctx.fillStyle = colour;
      ctx.fillText(words, s.x + 10, s.y - 8);
    };
    this.pairs.forEach((pair, i) => {
      const p = { x: pair.x_px, y: pair.y_px };
      marker(ctx, toScreen, p, 5, '#b6f36b');
      label(p, `P${i + 1}`, '#b6f36b');
    });
    if (this.pairPixel) marker(ctx, toScreen, this.pairPixel, 4, '#b6f36b');
    if (this.boundary) {
      const b = this.boundary;
      const p = { x: b.x, y: b.y };
      marker(ctx, toScreen, p, 9, '#ff5a36');
      label(p, `max ${maximum(b.max_stress_mpa, 2, 'MPa', b.max_is_lower_bound).replace(' (a lower bound)', '')}`, '#ffd0c4');
    }
  }

  drawLegend() {
    const legend = $('an-legend');
    const layer = this.layer();
    const picture = this.layerPicture(layer);
    legend.hidden = !picture;
    if (!picture) return;
    const bar = $('an-colourbar');
    bar.style.height = `${Math.max(200, $('an-view').clientHeight - 110)}px`;
    const legends = {
      map: ['Fringe order', { what: 'fringe order' }],
      stress: ['σ1 − σ2 (MPa)', { what: 'σ1 − σ2 in MPa' }],
      difference: ['Measured − predicted (MPa)', { what: 'measured minus predicted σ1 − σ2 in MPa', bottom: -picture.top, colourOf: diverging }],
    };
    const [caption, options] = legends[layer];
    $('an-legend-caption').textContent = caption;
    drawColourBar(bar, picture.top, options);
  }

  clearResult() {
    this.result = null;
    this.line = null;
    this.stressLayer = null;
    this.difference = null;
    this.boundary = null;
    $('an-results').hidden = true;
    $('an-mask-note').hidden = true;
    $('an-profile-figure').hidden = true;
    for (const value of ['map', 'stress', 'difference']) {
      document.querySelector(`input[name="an-layer"][value="${value}"]`).disabled = true;
    }
    for (const id of ['an-stress-stats', 'an-boundary-stats', 'an-compare-stats']) fillDl($(id), []);
    for (const id of ['an-boundary-bound', 'an-compare-bound']) lowerBoundNote($(id), false);
    $('an-edge-figure').hidden = true;
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

  // The multipart form that maps the photo with `calibration`: photo, mask or light-field photo (if any), options.
  async mapForm(calibration) {
    const form = new FormData();
    form.append('photo', this.photo.file, this.photo.file.name);
    form.append('calibration', calibration);
    const mask = await this.maskBlob();
    if (mask) form.append('mask', mask, 'mask.png');
    const mode = document.querySelector('input[name="an-mask"]:checked').value;
    if (!mask && mode === 'none') form.append('mask_source', 'whole_photo');
    const lightField = $('an-light-field').files[0];
    if (!mask && mode === 'find' && lightField) form.append('light_field_photo', lightField, lightField.name);
    form.append(
      'options',
      JSON.stringify({ hints: this.hints, exposure_compensation: $('an-exposure').checked, max_order: null }),
    );
    return form;
  }

  // Asks the service for the PDF report of the stored map (its stresses through the fringe value
  // and thickness, its mask's outline as the edge) and saves it.
  async report() {
    const error = $('an-error');
    showError(error, null);
    const button = $('an-report');
    button.disabled = true;
    try {
      if (!this.result) throw new Error('Make the fringe-order map first.');
      const body = this.lawFields();
      $('an-progress-text').textContent = 'Writing the report…';
      const blob = new Blob([await api.report(this.result.id, body)], { type: 'application/pdf' });
      const url = URL.createObjectURL(blob);
      const save = document.createElement('a');
      save.href = url;
      save.download = `stress-report-${this.result.id}.pdf`;
      save.click();
      setTimeout(() => URL.revokeObjectURL(url), 60_000);
      $('an-progress-text').textContent = 'Report saved.';
    } catch (e) {
      $('an-progress-text').textContent = '';
      showError(error, e);
    } finally {
      button.disabled = false;
    }
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
      form = await this.mapForm(calibration);
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
    const canvas = paintLayer(width, height, orders.data, flags.data, (n) => cividis(n / top));
    const found = answer.mask?.source === 'found' ? foundMaskPicture(flags.data, width, height) : null;
    this.result = {
      width,
      height,
      order: orders.data,
      uncertainty: uncertainty.data,
      flags: flags.data,
      canvas,
      top,
      id: answer.id,
      maxOrder: answer.statistics.max_order,
      lowerBound: answer.max_is_lower_bound,
      found,
    };
    showMaskNote(answer.mask);

    const caution = $('an-caution');
    caution.textContent = answer.caution ?? '';
    caution.hidden = !answer.caution;
    const st = answer.statistics;
    const share = (v) => `${fmt(v * 100, 1)} %`;
    fillDl($('an-stats'), [
      ['Fringe order', `${fmt(st.min_order)} to ${maximum(st.max_order, 2, '', answer.max_is_lower_bound)} (mean ${fmt(st.mean_order)})`],
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
    this.lawChanged();
  }

  // The law's fields as the API names them; throws a readable Error when either is missing.
  lawFields() {
    const f = requiredNumber($('an-fringe-value'), { positive: true, label: 'Material fringe value' });
    const h = requiredNumber($('an-thickness'), { positive: true, label: 'Thickness' });
    return { fringe_value_n_per_mm: f, thickness_mm: h };
  }

  // Samples the free-edge stress along the outline of the stored map's mask.
  async runBoundary() {
    const error = $('an-boundary-error');
    showError(error, null);
    const button = $('an-boundary-run');
    try {
      if (!this.result) throw new Error('Make the fringe-order map first.');
      const body = { ...this.lawFields(), include_edge: true };
      const nominal = numberIn($('an-nominal'), { positive: true, label: 'Nominal stress' });
      if (nominal !== null) body.nominal_stress_mpa = nominal;
      const mm = numberIn($('an-mm-per-px'), { positive: true, label: 'Millimetres per pixel' });
      if (mm !== null) body.mm_per_px = mm;
      button.disabled = true;
      this.boundary = await api.boundary(this.result.id, body);
      this.renderBoundary();
      this.view.draw();
    } catch (e) {
      showError(error, e);
    } finally {
      button.disabled = false;
    }
  }

  // The boundary's figures, its edge profile and (through the overlay) its maximum on the map.
  renderBoundary() {
    const b = this.boundary;
    const figure = $('an-edge-figure');
    if (!b) {
      figure.hidden = true;
      return;
    }
    const mm = this.mmPerPx();
    const lower = b.max_is_lower_bound;
    const along = (i) => b.edge[i].along_px;
    const peak = b.edge.findIndex((s) => s.x === b.x && s.y === b.y);
    fillDl($('an-boundary-stats'), [
      ['Largest |σ_t| at the edge', maximum(b.max_stress_mpa, 2, 'MPa', lower)],
      ['Where', `(${fmt(b.x, 1)}, ${fmt(b.y, 1)}) px${mm ? ` = (${fmt(b.x * mm, 2)}, ${fmt(b.y * mm, 2)}) mm` : ''}${peak >= 0 ? `, ${fmt(along(peak), 0)} px${inMm(along(peak), mm)} along the edge` : ''}`],
      ['Fringe order there', fmt(b.order, 3)],
      ['K_t = σ_max / σ_nom', b.kt === null || b.kt === undefined ? '' : `${maximum(b.kt, 3, '', lower)} (σ_nom ${fmt(b.nominal_stress_mpa, 2)} MPa)`],
      ['Edge points', `${b.valued_points.toLocaleString()} with a value of ${b.edge_points.toLocaleString()} sampled (${b.sample_insets_px.join(' and ')} px inside)`],
      ['Caution', `${b.caution}.`],
    ]);
    lowerBoundNote($('an-boundary-bound'), lower);
    const samples = b.edge.map((s, i) => ({
      distance: s.along_px,
      value: s.stress_mpa ?? NaN,
      gap: i > 0 && b.edge[i - 1].contour !== s.contour,
      shade: s.beyond_range,
    }));
    figure.hidden = false;
    const contours = new Set(b.edge.map((s) => s.contour)).size;
    const total = b.edge.length ? b.edge[b.edge.length - 1].along_px : 0;
    $('an-edge-caption').textContent =
      `|σ_t| along the edge, ${fmt(total, 0)} px${inMm(total, mm)} in ${contours} stretch${contours === 1 ? '' : 'es'}; ` +
      `largest ${maximum(b.max_stress_mpa, 2, 'MPa', lower)}, ringed` +
      (lower ? '; shaded where beyond-range pixels touch the edge.' : '.');
    const canvas = $('an-edge-profile');
    canvas.setAttribute('aria-label', $('an-edge-caption').textContent);
    drawProfile(canvas, samples, {
      yLabel: '|σ_t| (MPa)',
      xLabel: 'Distance along the edge',
      mmPerPx: mm,
      mark: peak >= 0 ? { distance: along(peak), value: b.max_stress_mpa } : null,
    });
  }

  addPair() {
    const error = $('an-compare-error');
    showError(error, null);
    try {
      const [xPx, yPx, xMm, yMm] = [
        ['an-pair-xpx', 'Pair pixel x'],
        ['an-pair-ypx', 'Pair pixel y'],
        ['an-pair-xmm', 'Pair model x'],
        ['an-pair-ymm', 'Pair model y'],
      ].map(([id, label]) => requiredNumber($(id), { label }));
      this.pairs.push({ x_px: xPx, y_px: yPx, x_mm: xMm, y_mm: yMm });
      for (const id of ['an-pair-xpx', 'an-pair-ypx', 'an-pair-xmm', 'an-pair-ymm']) $(id).value = '';
      this.pairPixel = null;
      this.renderPairs();
      this.view.draw();
    } catch (e) {
      showError(error, e);
    }
  }

  renderPairs() {
    $('an-pairs').replaceChildren(
      ...this.pairs.map((p, i) => {
        const li = document.createElement('li');
        const words = `P${i + 1}: (${fmt(p.x_px, 1)}, ${fmt(p.y_px, 1)}) px ↔ (${fmt(p.x_mm, 2)}, ${fmt(p.y_mm, 2)}) mm`;
        li.textContent = words;
        const remove = document.createElement('button');
        remove.type = 'button';
        remove.className = 'small';
        remove.textContent = 'Remove';
        remove.setAttribute('aria-label', `Remove pair ${words}`);
        remove.addEventListener('click', () => {
          this.pairs.splice(i, 1);
          this.renderPairs();
          this.view.draw();
        });
        li.append(' ', remove);
        return li;
      }),
    );
  }

  // Compares the stored map with the prediction: the figures, then the difference map as a layer.
  async runComparison() {
    const error = $('an-compare-error');
    showError(error, null);
    const button = $('an-compare-run');
    try {
      if (!this.result) throw new Error('Make the fringe-order map first.');
      const file = $('an-prediction').files[0];
      if (!file) {
        $('an-prediction').focus();
        throw new Error('Choose the prediction: a CSV of nodes x_mm, y_mm, σ1 − σ2 (MPa).');
      }
      if (this.pairs.length < 2) throw new Error(`Add at least two point pairs (pixel ↔ model point); there are ${this.pairs.length}.`);
      const body = { ...this.lawFields(), prediction: await file.text(), pairs: this.pairs };
      button.disabled = true;
      const id = this.result.id;
      const [c, bytes] = await Promise.all([api.comparison(id, body), api.comparisonMap(id, body)]);
      if (this.result?.id !== id) return;
      const npy = parseNpy(bytes);
      const reg = c.registration;
      fillDl($('an-compare-stats'), [
        ['Pixels compared', `${c.compared_pixels.toLocaleString()} (${fmt(100 * c.model_coverage, 1)} % of the specimen inside the model)`],
        ['Mean |measured − predicted|', `${fmt(c.mean_abs_difference_mpa, 3)} MPa`],
        ['Rms difference', `${fmt(c.rms_difference_mpa, 3)} MPa`],
        ['Mean difference (bias)', `${fmt(c.mean_difference_mpa, 3)} MPa`],
        ['Largest |difference|', `${maximum(c.max_abs_difference_mpa, 3, 'MPa', c.max_is_lower_bound)} at (${fmt(c.max_x, 1)}, ${fmt(c.max_y, 1)}) px = (${fmt(c.max_x_mm, 2)}, ${fmt(c.max_y_mm, 2)}) mm in the model`],
        ['Difference layer', 'blue: the photo reads lower than the prediction, red: higher; grey: outside the model'],
        ['Registration', `${reg.kind} from ${reg.pairs} pairs, rms ${fmt(reg.rms_mm, 3)} mm, ${fmt(reg.mm_per_px, 5)} mm per pixel${reg.mirrored ? ', mirrored (model y up)' : ''}`],
        ['Caution', `${c.caution}.`],
      ]);
      lowerBoundNote($('an-compare-bound'), c.max_is_lower_bound);
      const top = niceTop(c.max_abs_difference_mpa);
      const values = npy.data;
      const r = this.result;
      // Flagged pixels keep their flag's colour; valued pixels outside the model show grey.
      const canvas = paintLayer(r.width, r.height, values, r.flags, (d) => diverging(0.5 + d / (2 * top)), NOT_COMPARED);
      this.difference = { values, canvas, top, fringe_value_n_per_mm: c.fringe_value_n_per_mm, thickness_mm: c.thickness_mm };
      document.querySelector('input[name="an-layer"][value="difference"]').disabled = false;
      this.setLayer('difference');
    } catch (e) {
      showError(error, e);
    } finally {
      button.disabled = false;
    }
  }
}
