// The Calibrations page: the lab's list with search, a detail view with the table's colour strip,
// and a form that makes a new calibration from a beam photo.

import { api, session } from './api.js';
import { $, showError, fillDl, numberIn, requiredNumber, progress, when } from './dom.js';
import { TableStrip, fmt } from './plot.js';
import { labToRgb, css } from './colour.js';
import { ImageView, TwoPointGesture, decodeImage, strokeBoth } from './view.js';

// Tells the rest of the page that the list of calibrations has changed.
export const CHANGED = 'isotint:calibrations-changed';

const SOURCES = { beam_photo: 'beam photo', rendered: 'rendered from light source and camera data' };

// The ways to give the order at the beam edges (the value of the "cf-load" radios) and the part of
// the form each one shows.
const LOAD_PANELS = { edge: 'cf-edge-fields', load: 'cf-load-fields', estimate: 'cf-estimate-caution' };

// A link to another calibration (for "replaces" and "replaced by"), or undefined.
function calibrationLink(id) {
  if (!id) return undefined;
  const a = document.createElement('a');
  a.href = `#/calibrations/${encodeURIComponent(id)}`;
  a.textContent = 'open';
  return a;
}

function summaryPairs(c) {
  const source = c.table?.source ?? {};
  const beam = source.kind === 'beam_photo';
  return [
    ['Material', c.material],
    ['Thickness', c.thickness_mm != null ? `${fmt(c.thickness_mm, 2)} mm` : ''],
    ['Fringe order at the beam edges', beam ? fmt(source.edge_order, 3) : ''],
    ['Material fringe value', beam
      ? (source.fringe_value_n_per_mm != null
        ? `${fmt(source.fringe_value_n_per_mm, 2)} N/mm per fringe (stored with the calibration: from the beam's load or given)`
        : 'not recorded (the beam was calibrated from its edge order alone)')
      : ''],
    ['Light source', c.light_source],
    ['Camera', c.camera],
    ['Made', when(c.created_at)],
    ['Source', SOURCES[c.source_kind] || c.source_kind],
    ['Calibrated up to', `fringe order ${fmt(c.max_order)}`],
    ['Order step', fmt(c.order_step, 3)],
    ['Fit residual', c.residual_de2000 != null ? `${fmt(c.residual_de2000)} ΔE00 (CIEDE2000, mean; below 1 good, above 2 poor)` : ''],
    ['Replaces', calibrationLink(c.supersedes)],
    ['Replaced by', calibrationLink(c.superseded_by)],
    ['Notes', c.notes],
  ];
}

export class CalibrationsPage {
  constructor() {
    this.list = $('cal-list');
    this.listStatus = $('cal-list-status');
    this.search = $('cal-search');
    this.strip = new TableStrip($('cal-strip'), $('cal-strip-readout'));
    this.current = null;
    this.searchTimer = 0;
    this.listRequest = 0;
    this.search.addEventListener('input', () => {
      clearTimeout(this.searchTimer);
      this.searchTimer = setTimeout(() => this.refresh(), 250);
    });
    $('cal-archive').addEventListener('click', () => this.toggleArchived());
    $('cal-show-archived').addEventListener('change', () => this.refresh());
    $('cal-more').addEventListener('click', () => this.more());
    $('cal-audit-more').addEventListener('click', () => this.audit(this.current?.id, this.auditNext));
    document.addEventListener(CHANGED, () => this.refresh());
    this.form = new NewCalibrationForm();
  }

  // Shows the page for a route: '' (list only), 'new' or a calibration id.
  async show(target) {
    $('cal-empty').hidden = target !== '';
    $('cal-detail').hidden = true;
    $('cal-form').hidden = target !== 'new';
    if (target === 'new') this.form.open();
    this.selected = target;
    this.markSelected();
    if (!this.loaded) {
      this.loaded = true;
      await this.refresh();
    }
    if (target !== '' && target !== 'new') await this.detail(target);
  }

  // Shows the first page of the search.
  async refresh() {
    this.next = null;
    this.shown = 0;
    await this.load(true);
  }

  // Adds the next page of the search below the rows shown.
  async more() {
    if (this.next) await this.load(false);
  }

  async load(first) {
    const request = ++this.listRequest;
    const q = this.search.value.trim();
    const more = $('cal-more');
    more.disabled = true;
    this.listStatus.textContent = 'Loading…';
    try {
      const page = await api.calibrationPage(q, $('cal-show-archived').checked, first ? null : this.next);
      if (request !== this.listRequest) return;
      this.render(page.calibrations, !first);
      this.next = page.next || null;
      this.shown += page.calibrations.length;
      const n = page.total;
      this.listStatus.textContent =
        n === 0
          ? q ? `No calibration matches “${q}”.` : 'No calibrations yet.'
          : `${n} calibration${n === 1 ? '' : 's'}${this.next ? `, ${this.shown} shown` : ''}`;
      more.hidden = !this.next;
    } catch (error) {
      if (request === this.listRequest) this.listStatus.textContent = error.message;
    } finally {
      if (request === this.listRequest) more.disabled = false;
    }
  }

  // Lists `calibrations`, after the rows shown when `append`.
  render(calibrations, append = false) {
    const items = calibrations.map((c) => {
      const li = document.createElement('li');
      const a = document.createElement('a');
      a.href = `#/calibrations/${encodeURIComponent(c.id)}`;
      a.dataset.id = c.id;
      const name = document.createElement('span');
      name.className = 'cal-name';
      name.textContent = c.name;
      const sub = document.createElement('span');
      sub.className = 'cal-sub';
      sub.textContent = [c.material, c.light_source, `to N = ${fmt(c.max_order, 1)}`].filter(Boolean).join(' · ');
      const comma = document.createElement('span');
      comma.className = 'visually-hidden';
      comma.textContent = ', ';
      a.append(name, comma, sub);
      if (c.archived) {
        const badge = document.createElement('span');
        badge.className = 'badge';
        badge.textContent = 'archived';
        a.append(comma.cloneNode(true), badge);
      }
      li.append(a);
      return li;
    });
    if (append) this.list.append(...items);
    else this.list.replaceChildren(...items);
    this.markSelected();
  }

  markSelected() {
    for (const a of this.list.querySelectorAll('a')) {
      if (a.dataset.id === this.selected) a.setAttribute('aria-current', 'true');
      else a.removeAttribute('aria-current');
    }
  }

  async detail(id) {
    const error = $('cal-detail-error');
    showError(error, null);
    try {
      const c = await api.calibration(id);
      if (this.selected !== id) return;
      this.current = c;
      $('cal-detail').hidden = false;
      $('cal-detail-name').textContent = c.name;
      $('cal-detail-archived').hidden = !c.archived;
      $('cal-archive').textContent = c.archived ? 'Restore to the list' : 'Archive';
      fillDl($('cal-detail-meta'), summaryPairs(c));
      this.strip.show(c.table);
      fillValues($('cal-values').tBodies[0], c.table.entries);
      const exportLink = $('cal-export');
      exportLink.href = api.exportUrl(c.id);
      exportLink.download = `${c.name.replace(/[^\w.-]+/g, '_') || 'calibration'}.json`;
      $('cal-use').href = `#/analyse?calibration=${encodeURIComponent(c.id)}`;
      $('cal-use').hidden = c.archived; // the analysis page offers listed calibrations only
      if (session.may('GET /api/v1/audit')) await this.audit(c.id);
    } catch (e) {
      $('cal-empty').hidden = true;
      $('cal-detail').hidden = false;
      $('cal-detail-name').textContent = 'Calibration not available';
      fillDl($('cal-detail-meta'), []);
      showError(error, e);
    }
  }

  // Lists the audit rows of calibration `id`, newest first: the first page, or the page `next`
  // names below the rows shown.
  async audit(id, next = null) {
    if (!id) return;
    const tbody = $('cal-audit-rows').tBodies[0];
    const status = $('cal-audit-status');
    const more = $('cal-audit-more');
    if (!next) tbody.replaceChildren();
    status.textContent = 'Loading…';
    try {
      const page = await api.auditPage(id, next);
      if (this.current?.id !== id) return;
      for (const e of page.events) {
        const tr = document.createElement('tr');
        for (const value of [when(e.at), e.actor, e.action, e.detail, e.address || '']) {
          const td = document.createElement('td');
          td.textContent = value;
          tr.append(td);
        }
        tbody.append(tr);
      }
      this.auditNext = page.next || null;
      more.hidden = !this.auditNext;
      const n = tbody.rows.length;
      status.textContent = n === 0 ? 'No changes recorded.' : `${n} change${n === 1 ? '' : 's'}${this.auditNext ? ' shown; older ones follow' : ''}, newest first.`;
    } catch (e) {
      status.textContent = e.message;
    }
  }

  // Archives the calibration shown (after a confirmation) or restores it to the list.
  async toggleArchived() {
    const c = this.current;
    if (!c) return;
    const question = `Archive “${c.name}”? It stays readable here (tick “Show archived ones too”) but leaves the list.`;
    if (!c.archived && !window.confirm(question)) return;
    try {
      await (c.archived ? api.restore(c.id) : api.archive(c.id));
      document.dispatchEvent(new CustomEvent(CHANGED));
      await this.detail(c.id);
    } catch (e) {
      showError($('cal-detail-error'), e);
    }
  }
}

// Rows of the "Table values" table: about 50 evenly spaced entries.
function fillValues(tbody, entries) {
  const every = Math.max(1, Math.round(entries.length / 50));
  tbody.replaceChildren(
    ...entries
      .filter((_, i) => i % every === 0 || i === entries.length - 1)
      .map((e) => {
        const tr = document.createElement('tr');
        const swatch = document.createElement('span');
        swatch.className = 'swatch';
        swatch.style.background = css(labToRgb(e.lab));
        const cells = [fmt(e.order, 2), swatch, fmt(e.lab[0], 1), fmt(e.lab[1], 1), fmt(e.lab[2], 1),
          fmt(Math.hypot(...e.spread), 1), String(e.samples)];
        for (const value of cells) {
          const td = document.createElement('td');
          td.append(value);
          tr.append(td);
        }
        return tr;
      }),
  );
}

// Words for a confidence of the edge-order estimate: a fair one is marked as a warning.
function confidenceNode(confidence) {
  const span = document.createElement('span');
  if (confidence === 'fair') {
    span.className = 'warning';
    span.textContent = 'fair: the runner-up is not far behind, so confirm the edge order against a known load';
  } else {
    span.textContent = confidence;
  }
  return span;
}

// The edge-order estimate of a check, if the service made one (else the part is hidden).
function showEstimate(estimate) {
  $('cf-estimate').hidden = !estimate;
  if (!estimate) return;
  const rival = estimate.runner_up;
  fillDl($('cf-estimate-values'), [
    ['Estimated edge order', fmt(estimate.edge_order, 3)],
    ['Confidence', confidenceNode(estimate.confidence)],
    ['Runner-up', rival
      ? `edge order ${fmt(rival.edge_order, 3)}, fits ${fmt(estimate.cost_ratio, 1)} times worse`
      : 'none found'],
  ]);
  $('cf-estimate-statement').textContent = estimate.statement;
}

// The "new calibration" form: photo, constant-moment zone, edge order (given, from the load or
// estimated from the colours), description, a dry run that shows the fit, then saving.
class NewCalibrationForm {
  constructor() {
    this.el = $('cal-form');
    this.view = new ImageView($('cf-view'), { maxHeight: () => Math.max(240, window.innerHeight * 0.5) });
    this.readout = $('cf-view-readout');
    this.fields = ['left', 'top', 'right', 'bottom'].map((k) => [k, $(`cf-${k}`)]); // [key, input]
    this.strip = new TableStrip($('cf-strip'), $('cf-strip-readout'));
    this.progress = progress($('cf-progress'), $('cf-progress-text'), 'Measuring the beam…');
    this.photo = null;
    this.region = null;
    this.checked = false; // whether the fit shown matches the inputs as they are
    this.edits = 0; // counts changes to the inputs

    const gesture = new TwoPointGesture((a, b) => this.setRegion(a, b));
    this.gesture = gesture;
    this.view.setTool({
      press: (p) => gesture.press(p),
      drag: (p) => {
        gesture.drag(p);
        this.point(p);
      },
      release: (p) => {
        gesture.release(p);
        this.point(p);
      },
      hover: (p) => {
        gesture.hover(p);
        this.point(p);
      },
      cancel: () => gesture.cancel(),
    });
    this.view.overlay = (ctx, toScreen) => {
      if (!this.region) return;
      const { left, top, right, bottom } = this.region;
      const a = toScreen({ x: left, y: top });
      const b = toScreen({ x: right, y: bottom });
      ctx.beginPath();
      ctx.rect(a.x, a.y, b.x - a.x, b.y - a.y);
      strokeBoth(ctx);
      // Mid-line of the beam, where the order is zero.
      ctx.beginPath();
      ctx.setLineDash([6, 4]);
      ctx.moveTo(a.x, (a.y + b.y) / 2);
      ctx.lineTo(b.x, (a.y + b.y) / 2);
      strokeBoth(ctx, 1);
      ctx.setLineDash([]);
    };

    $('cf-photo').addEventListener('change', () => this.loadPhoto());
    for (const [, input] of this.fields) input.addEventListener('input', () => this.regionFromFields());
    for (const radio of this.el.querySelectorAll('input[name="cf-load"]')) {
      radio.addEventListener('change', () => this.showLoadFields());
    }
    this.el.addEventListener('input', () => this.invalidate());
    this.el.addEventListener('change', () => this.invalidate());
    this.el.addEventListener('submit', (e) => {
      e.preventDefault();
      this.run(true);
    });
    $('cf-save').addEventListener('click', () => this.run(false));
  }

  open() {
    this.view.fit();
    this.strip.draw();
  }

  point(p) {
    const r = this.region;
    const next = this.gesture.pending
      ? ' Now point at the opposite corner and click (or press Enter).'
      : r
        ? ''
        : ' Drag to draw the zone.';
    this.readout.textContent =
      `Cursor at x ${fmt(p.x, 1)}, y ${fmt(p.y, 1)} px.` +
      (r ? ` Zone ${fmt(r.right - r.left, 0)} × ${fmt(r.bottom - r.top, 0)} px.` : '') +
      next;
  }

  async loadPhoto() {
    const file = $('cf-photo').files[0];
    showError($('cf-error'), null);
    this.photo = null;
    this.view.setSource(null);
    if (!file) return;
    try {
      const { bitmap, width, height } = await decodeImage(file);
      this.photo = { width, height };
      this.view.setSource(bitmap, width, height);
      this.readout.textContent = `Photo ${width} × ${height} px. Drag over the constant-moment zone, or type its edges.`;
      for (const [k, input] of this.fields) input.max = String(k === 'left' || k === 'right' ? width : height);
    } catch (e) {
      this.readout.textContent = 'The photo cannot be shown here; type the zone’s edges in pixels.';
      showError($('cf-error'), e);
    }
  }

  // Sets the zone from two corners (image coordinates, snapped to whole pixel edges).
  setRegion(a, b) {
    const snap = Math.round;
    this.region = {
      left: snap(Math.min(a.x, b.x)),
      top: snap(Math.min(a.y, b.y)),
      right: snap(Math.max(a.x, b.x)),
      bottom: snap(Math.max(a.y, b.y)),
    };
    for (const [k, input] of this.fields) input.value = String(this.region[k]);
    this.invalidate();
  }

  regionFromFields() {
    const values = Object.fromEntries(this.fields.map(([k, input]) => [k, Number(input.value)]));
    const complete = this.fields.every(([, input]) => input.value.trim() !== '');
    this.region = complete && Object.values(values).every(Number.isFinite) ? values : null;
    this.view.draw();
  }

  // How the order at the beam edges is given: 'edge', 'load' or 'estimate'.
  loadChoice() {
    return this.el.querySelector('input[name="cf-load"]:checked').value;
  }

  showLoadFields() {
    const choice = this.loadChoice();
    for (const [value, id] of Object.entries(LOAD_PANELS)) $(id).hidden = value !== choice;
  }

  // Any change after a dry run means the fit shown no longer matches: saving needs a new check.
  invalidate() {
    this.edits += 1;
    if (!this.checked) return;
    this.checked = false;
    $('cf-save').disabled = true;
    $('cf-report-heading').textContent = 'Fit of the last check (the inputs have changed since: check again before saving)';
  }

  spec(dryRun) {
    const name = $('cf-name').value.trim();
    const region = Object.fromEntries(this.fields.map(([k, input]) => [k, requiredNumber(input)]));
    if (region.right <= region.left || region.bottom <= region.top) {
      $('cf-right').focus();
      throw new Error('The zone needs right > left and bottom > top: drag a rectangle on the photo.');
    }
    const spec = { name, region, refine_edges: $('cf-refine').checked, dry_run: dryRun };
    const load = this.loadChoice();
    if (load === 'load') {
      spec.moment_n_mm = requiredNumber($('cf-moment'), { positive: true });
      spec.depth_mm = requiredNumber($('cf-depth'), { positive: true });
      spec.fringe_value_n_per_mm = requiredNumber($('cf-fringe-value'), { positive: true });
    } else if (load === 'estimate') {
      spec.estimate_edge_order = true;
    } else {
      spec.edge_order = requiredNumber($('cf-edge-order'), { positive: true });
      // Optional: stored with the table as the default fringe value of stress inputs.
      const fringeValue = numberIn($('cf-edge-fringe-value'), { positive: true });
      if (fringeValue !== null) spec.fringe_value_n_per_mm = fringeValue;
    }
    const thickness = numberIn($('cf-thickness'), { positive: true });
    if (thickness !== null) spec.thickness_mm = thickness;
    for (const [key, id] of [['material', 'cf-material'], ['light_source', 'cf-light'], ['camera', 'cf-camera'], ['notes', 'cf-notes']]) {
      const text = $(id).value.trim();
      if (text) spec[key] = text;
    }
    if (!name) {
      $('cf-name').focus();
      throw new Error('Name: give the calibration a name.');
    }
    return spec;
  }

  async run(dryRun) {
    const error = $('cf-error');
    showError(error, null);
    const file = $('cf-photo').files[0];
    let spec;
    try {
      if (!file) {
        $('cf-photo').focus();
        throw new Error('Choose the beam photo first.');
      }
      spec = this.spec(dryRun);
    } catch (e) {
      showError(error, e);
      return;
    }
    const form = new FormData();
    form.append('photo', file, file.name);
    form.append('spec', JSON.stringify(spec));
    $('cf-check').disabled = true;
    $('cf-save').disabled = true;
    const edits = this.edits;
    try {
      const answer = await api.createCalibration(form, (f) => this.progress.report(f));
      if (dryRun) {
        this.progress.done('Checked. Nothing has been saved yet.');
        this.showReport(answer.report, answer.table);
        this.checked = edits === this.edits;
      } else {
        this.progress.done('Saved.');
        this.reset();
        document.dispatchEvent(new CustomEvent(CHANGED));
        window.location.hash = `#/calibrations/${encodeURIComponent(answer.id)}`;
      }
    } catch (e) {
      this.progress.done();
      showError(error, e);
    } finally {
      $('cf-check').disabled = false;
      $('cf-save').disabled = !this.checked;
    }
    if (dryRun && this.checked) $('cf-save').focus();
  }

  showReport(report, table) {
    $('cf-report').hidden = false;
    $('cf-report-heading').textContent = 'Fit of the new calibration (not saved yet)';
    const shift = report.edge_shift;
    fillDl($('cf-report-values'), [
      ['Mean residual', `${fmt(report.residual_mean_de2000)} ΔE00`],
      ['95th percentile', `${fmt(report.residual_p95_de2000)} ΔE00`],
      ['Edge fringe order', fmt(report.edge_order, 3)],
      ['Calibrated up to', `fringe order ${fmt(report.max_order)}`],
      ['Rows used', report.rows_used],
      ['Edge rows skipped', report.edge_rows_skipped],
      ['Outlier rows', report.outlier_rows],
      ['Edges moved by', shift ? `top ${fmt(shift.top_px, 1)} px, bottom ${fmt(shift.bottom_px, 1)} px` : ''],
      ['Implied material fringe value', report.fringe_value_n_per_mm != null ? `${fmt(report.fringe_value_n_per_mm, 2)} N/mm per fringe` : ''],
    ]);
    showEstimate(report.edge_order_estimate);
    this.strip.show(table);
  }

  reset() {
    this.el.reset();
    this.checked = false;
    this.region = null;
    this.photo = null;
    this.view.setSource(null);
    $('cf-report').hidden = true;
    this.showLoadFields();
    this.readout.textContent = 'No photo loaded.';
  }
}
