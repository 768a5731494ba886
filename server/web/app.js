// isotint workbench: routes between the Calibrations, "Analyse a photo" and "Load series" pages
// by the URL's hash (#/calibrations, #/calibrations/new, #/calibrations/ID,
// #/analyse?calibration=ID, #/series).
// In token mode it first asks for a token (when the service answers 401), shows who is signed
// in with which role, and hides the actions that role may not take.

import { api, session, SIGNED_OUT, downloadWithToken } from './api.js';
import { $, showError } from './dom.js';
import { CalibrationsPage, CHANGED } from './calibrations.js';
import { AnalysisPage } from './analysis.js';
import { SeriesPage } from './series.js';

const pages = {
  calibrations: { el: document.getElementById('page-calibrations'), page: new CalibrationsPage() },
  analyse: { el: document.getElementById('page-analyse'), page: new AnalysisPage() },
  series: { el: document.getElementById('page-series'), page: new SeriesPage() },
};

const TITLES = { calibrations: 'Calibrations', analyse: 'Analyse a photo', series: 'Load series' };

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
  document.title = `${TITLES[name]} · isotint`;
  const { page } = pages[name];
  if (name === 'analyse') page.show(new URLSearchParams(query));
  else page.show(decodeURIComponent(rest.join('/')));
}

// Shows who is signed in and hides every element whose data-needs names an operation the
// caller may not call.
function showWho() {
  const who = session.who;
  $('who').hidden = !who;
  if (who) {
    $('who-text').textContent = who.mode === 'open'
      ? 'Open access: this service asks for no sign-in'
      : `Signed in as ${who.name} · role ${who.role}`;
    $('who-sign-out').hidden = who.mode === 'open';
  }
  for (const el of document.querySelectorAll('[data-needs]')) {
    el.classList.toggle('not-allowed', !session.may(el.dataset.needs));
  }
}

// Asks the service who the caller is; false when it wants a token (the SIGNED_OUT handler then
// asks for one) or could not be asked.
async function loadSession() {
  try {
    session.who = await api.session();
    showWho();
    return true;
  } catch (error) {
    if (error.status !== 401) $('who-text').textContent = error.message;
    return false;
  }
}

let started = false;

// Shows the pages (the first time), or reloads their lists after signing in again.
function start() {
  if (started) {
    document.dispatchEvent(new CustomEvent(CHANGED));
    route();
    return;
  }
  started = true;
  window.addEventListener('hashchange', route);
  route();
}

const dialog = $('sign-in');

// A 401 anywhere: forget the token and ask for one, saying why when a token was refused.
document.addEventListener(SIGNED_OUT, (event) => {
  const refused = Boolean(session.token());
  session.signOut();
  showWho();
  // Several calls may be refused at once: only the first, which still had the token, says why.
  if (refused) showError($('sign-in-error'), event.detail);
  else if (!dialog.open) showError($('sign-in-error'), null);
  if (!dialog.open) dialog.showModal();
  $('sign-in-token').focus();
});
dialog.addEventListener('cancel', (event) => event.preventDefault()); // nothing works without one

$('sign-in-form').addEventListener('submit', async (event) => {
  event.preventDefault();
  const input = $('sign-in-token');
  const token = input.value.trim();
  if (!token) {
    showError($('sign-in-error'), new Error('Paste your token first.'));
    input.focus();
    return;
  }
  session.signIn(token);
  $('sign-in-submit').disabled = true;
  const signedIn = await loadSession();
  $('sign-in-submit').disabled = false;
  if (!signedIn) return;
  input.value = '';
  showError($('sign-in-error'), null);
  dialog.close();
  start();
});

$('who-sign-out').addEventListener('click', () => {
  session.signOut();
  window.location.reload();
});

document.addEventListener('click', downloadWithToken);

// Signed in (or open mode): show the pages. A 401 opened the sign-in dialog, which starts them;
// any other failure shows the pages, which explain it themselves.
if ((await loadSession()) || !dialog.open) start();
