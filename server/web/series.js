// The "Load series" page: photos of one specimen in one view at known loads, a mask and a
// calibration, sent as one request to the series API; shows the fitted slope of order
// against load, the linearity residual, the share of pixels that do not scale and, for a disc
// of known diameter, the material fringe value.

import { api } from './api.js';
import { $, showError, fillDl, numberIn, requiredNumber, progress } from './dom.js';
import { fmt } from './plot.js';
import { CHANGED } from './calibrations.js';

const PHOTO_TYPES = 'image/png,image/jpeg,image/tiff,.png,.jpg,.jpeg,.tif,.tiff';

// A number in scientific notation for small slopes (fringes per N).
const sci = (v) => (Number.isFinite(v) ? v.toExponential(4).replace('-', '−') : '–');

export class SeriesPage {
  constructor() {
    this.progress = progress($('se-progress'), $('se-progress-text'), 'Mapping every photo and fitting the series…');
    this.rows = 0;
    $('se-add').addEventListener('click', () => this.addRow(true));
    $('se-run').addEventListener('click', () => this.run());
    document.addEventListener(CHANGED, () => this.loadCalibrations());
    this.addRow(false);
    this.addRow(false);
  }

  show() {
    if (!this.loaded) {
      this.loaded = true;
      this.loadCalibrations();
    }
  }

  async loadCalibrations() {
    const select = $('se-calibration');
    const keep = select.value;
    try {
      const calibrations = await api.allCalibrations();
      select.replaceChildren(
        new Option(calibrations.length ? 'Choose a calibration…' : 'No calibrations yet: make one first', ''),
        ...calibrations.map((c) => new Option(`${c.name}${c.material ? ` (${c.material})` : ''}, to N = ${fmt(c.max_order, 1)}`, c.id)),
      );
      select.value = calibrations.some((c) => c.id === keep) ? keep : '';
    } catch (e) {
      select.replaceChildren(new Option('Calibrations could not be loaded', ''));
      showError($('se-error'), e);
    }
  }

  // Adds a row: a photo and its load, with a button that removes it.
  addRow(focus) {
    this.rows += 1;
    const n = this.rows;
    const li = document.createElement('li');
    li.className = 'series-row';
    li.innerHTML = `
      <div class="field"><label for="se-photo-${n}">Photo</label><input id="se-photo-${n}" class="se-photo" type="file" accept="${PHOTO_TYPES}"></div>
      <div class="field"><label for="se-load-${n}">Load (N)</label><input id="se-load-${n}" class="se-load" type="number" step="any" min="0"></div>
      <button type="button" class="small">Remove</button>`;
    li.querySelector('button').addEventListener('click', () => {
      li.remove();
      this.renumber();
    });
    $('se-rows').append(li);
    this.renumber();
    if (focus) li.querySelector('input').focus();
  }

  // Names each row's inputs and button by its place, for screen readers.
  renumber() {
    [...$('se-rows').children].forEach((li, i) => {
      li.querySelector('.se-photo').labels[0].textContent = `Photo ${i + 1}`;
      li.querySelector('.se-load').labels[0].textContent = `Load ${i + 1} (N)`;
      li.querySelector('button').setAttribute('aria-label', `Remove photo ${i + 1}`);
    });
  }

  async run() {
    const error = $('se-error');
    showError(error, null);
    let form;
    try {
      const calibration = $('se-calibration').value;
      if (!calibration) {
        $('se-calibration').focus();
        throw new Error('Choose a calibration.');
      }
      const mask = $('se-mask').files[0];
      const rows = [...$('se-rows').children];
      if (rows.length < 2) throw new Error(`A series needs at least two photos; there ${rows.length === 1 ? 'is one' : 'are none'}.`);
      form = new FormData();
      form.append('calibration', calibration);
      // Without a mask the service finds the specimen in the photo of the largest load.
      if (mask) form.append('mask', mask, mask.name);
      const loads = [];
      rows.forEach((li, i) => {
        const input = li.querySelector('.se-photo');
        const photo = input.files[0];
        if (!photo) {
          input.focus();
          throw new Error(`Choose photo ${i + 1}, or remove its row.`);
        }
        form.append('photo', photo, photo.name);
        loads.push(requiredNumber(li.querySelector('.se-load'), { positive: true, label: `Load ${i + 1}` }));
      });
      const series = { loads_n: loads };
      const diameter = numberIn($('se-diameter'), { positive: true, label: 'Disc diameter' });
      const thickness = numberIn($('se-thickness'), { positive: true, label: 'Disc thickness' });
      if (diameter !== null) series.disc_diameter_mm = diameter;
      if (thickness !== null) series.thickness_mm = thickness;
      form.append('series', JSON.stringify(series));
    } catch (e) {
      showError(error, e);
      return;
    }
    const button = $('se-run');
    button.disabled = true;
    try {
      const answer = await api.series(form, (f) => this.progress.report(f));
      this.progress.done(`Fitted ${answer.photos} photos.`);
      this.showResult(answer);
    } catch (e) {
      this.progress.done();
      showError(error, e);
    } finally {
      button.disabled = false;
    }
  }

  showResult(s) {
    $('se-empty').hidden = true;
    $('se-result').hidden = false;
    $('se-caution').textContent = `Caution: ${s.caution}.`;
    const share = (v) => `${fmt(100 * v, 1)} %`;
    fillDl($('se-values'), [
      ['Material fringe value f_σ', s.fringe_value === null ? '' : `${fmt(s.fringe_value, 3)} N/mm per fringe (from the disc's centre, σ1 − σ2 = 8P/(πDh))`],
      ['Stress per fringe f_σ/h', s.stress_per_fringe_mpa === null ? '' : `${fmt(s.stress_per_fringe_mpa, 4)} MPa`],
      ['Slope at the centre', s.slope_fringes_per_n === null ? 'no fitted pixel near the centre' : `${sci(s.slope_fringes_per_n)} fringes per N (${s.centre_pixels.toLocaleString()} pixels around (${fmt(s.centre_x, 1)}, ${fmt(s.centre_y, 1)}))`],
      ['Mean slope', `${sci(s.mean_slope_fringes_per_n)} fringes per N`],
      ['Linearity (rms of N − s·P)', `${fmt(s.linearity_rms, 4)} fringes`],
      ['Pixels that do not scale', `${share(s.nonlinear_share)} (${s.nonlinear_pixels.toLocaleString()} with a residual rms over ${fmt(s.nonlinear_tolerance, 2)} fringe)`],
      ['Pixels fitted', `${s.fitted_pixels.toLocaleString()} of ${s.specimen_pixels.toLocaleString()}`],
      ['Loads', `${s.loads_n.map((l) => fmt(l, 1)).join(', ')} N`],
    ]);
  }
}
