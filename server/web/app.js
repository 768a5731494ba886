// isotint workbench: routes between the Calibrations and "Analyse a photo" pages by the URL's
// hash (#/calibrations, #/calibrations/new, #/calibrations/ID, #/analyse?calibration=ID).

import { CalibrationsPage } from './calibrations.js';
import { AnalysisPage } from './analysis.js';

const pages = {
  calibrations: { el: document.getElementById('page-calibrations'), page: new CalibrationsPage() },
  analyse: { el: document.getElementById('page-analyse'), page: new AnalysisPage() },
};

function route() {
  const hash = window.location.hash.replace(/^#\/?/, '');
  const [path, query = ''] = hash.split('?');
  const [name, ...rest] = path.split('/');
  if (!(name in pages)) {
    window.location.replace('#/calibrations');
    return;
  }
  for (const [key, { el }] of Object.entries(pages)) el.hidden = key !== name;
  for (const link of document.querySelectorAll('nav a')) {
    if (link.dataset.page === name) link.setAttribute('aria-current', 'page');
    else link.removeAttribute('aria-current');
  }
  document.title = `${name === 'analyse' ? 'Analyse a photo' : 'Calibrations'} · isotint`;
  const { page } = pages[name];
  if (name === 'analyse') page.show(new URLSearchParams(query));
  else page.show(decodeURIComponent(rest.join('/')));
}

window.addEventListener('hashchange', route);
route();
