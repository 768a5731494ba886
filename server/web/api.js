// Talking to the isotint service. Every failure becomes an ApiError whose message can be shown
// to the user as it is.

export class ApiError extends Error {
  constructor(message, code = 'error', status = 0) {
    super(message);
    this.code = code;
    this.status = status;
  }
}

const UNREACHABLE = 'The isotint service could not be reached. Check that it is running, then try again.';

// Sent (as a document event, detail: the ApiError) when the service answers 401: no token, or
// one that is unknown or revoked. The page asks for a token again.
export const SIGNED_OUT = 'isotint:signed-out';

const TOKEN_KEY = 'isotint-token';

// The signed-in caller: the token kept for this browser tab (sessionStorage, so it is gone when
// the tab closes) and what GET /api/v1/session said about it ({mode, name, role, allowed}).
export const session = {
  who: null,
  token() {
    return sessionStorage.getItem(TOKEN_KEY);
  },
  signIn(token) {
    sessionStorage.setItem(TOKEN_KEY, token);
  },
  signOut() {
    sessionStorage.removeItem(TOKEN_KEY);
    this.who = null;
  },
  // Whether the caller may call an operation, as the API spells it ("POST /api/v1/audit").
  may(operation) {
    return Boolean(this.who && this.who.allowed.includes(operation));
  },
};

// The Authorization header of the session's token, if there is one.
function authorization() {
  const token = session.token();
  return token ? { Authorization: `Bearer ${token}` } : {};
}

// Why the service answered 401, in words, by its error code.
const SIGN_IN_REASONS = {
  missing_token: 'This service asks for a token.',
  invalid_token: 'That is not an isotint token (they start with isotint_ and 64 hex digits).',
  unknown_token: 'The token is unknown here or has been revoked.',
};

// Rewrites a 401 or 403 answer in words a person can act on; tells the page about a 401.
function explained(error) {
  if (error.status === 401) {
    error.message = `${SIGN_IN_REASONS[error.code] || 'The service asks for a token.'} Sign in with a token from your lab's admin.`;
    document.dispatchEvent(new CustomEvent(SIGNED_OUT, { detail: error }));
  } else if (error.status === 403) {
    const who = session.who;
    const as = who && who.name ? `You are signed in as ${who.name}, with the role ${who.role}, which` : 'Your token';
    error.message = `${as} may not do this. Ask your lab's admin for a token with a higher role. (The service said: ${error.message})`;
  }
  return error;
}

// Builds an ApiError from a response body (text) and HTTP status: the service's
// {"error":{"code","message"}} when present, otherwise a plain description of the status.
function errorFrom(status, statusText, body) {
  try {
    const parsed = JSON.parse(body);
    if (parsed && parsed.error && typeof parsed.error.message === 'string') {
      return explained(new ApiError(parsed.error.message, parsed.error.code || 'error', status));
    }
  } catch {
    // not JSON: fall through to the generic message
  }
  const what = statusText ? `${status} ${statusText}` : `status ${status}`;
  return explained(new ApiError(`The service answered ${what}.`, 'http', status));
}

async function send(url, init = {}) {
  let response;
  try {
    response = await fetch(url, { ...init, headers: { ...init.headers, ...authorization() } });
  } catch {
    throw new ApiError(UNREACHABLE, 'network');
  }
  if (!response.ok) {
    throw errorFrom(response.status, response.statusText, await response.text());
  }
  return response;
}

export async function getJson(url) {
  return (await send(url, { headers: { Accept: 'application/json' } })).json();
}

export async function postJson(url) {
  const response = await send(url, { method: 'POST', headers: { Accept: 'application/json' } });
  const text = await response.text();
  return text ? JSON.parse(text) : {};
}

export async function getBytes(url) {
  return (await send(url)).arrayBuffer();
}

// POSTs `body` as JSON; resolves to the answer's JSON, or with `bytes` to its bytes.
async function postBody(url, body, { bytes = false } = {}) {
  const response = await send(url, {
    method: 'POST',
    headers: { 'Content-Type': 'application/json', Accept: bytes ? 'application/octet-stream' : 'application/json' },
    body: JSON.stringify(body),
  });
  return bytes ? response.arrayBuffer() : response.json();
}

const mapUrl = (id) => `/api/v1/order-maps/${encodeURIComponent(id)}`;

// POSTs multipart form data with XMLHttpRequest so that upload progress can be reported:
// onProgress(fraction) while the body is sent, then onProgress(null) while the service works.
export function postForm(url, form, onProgress) {
  return new Promise((resolve, reject) => {
    const xhr = new XMLHttpRequest();
    xhr.open('POST', url);
    xhr.setRequestHeader('Accept', 'application/json');
    for (const [name, value] of Object.entries(authorization())) xhr.setRequestHeader(name, value);
    xhr.upload.addEventListener('progress', (event) => {
      if (event.lengthComputable) onProgress(event.loaded / event.total);
    });
    xhr.upload.addEventListener('load', () => onProgress(null));
    xhr.addEventListener('load', () => {
      if (xhr.status >= 200 && xhr.status < 300) {
        try {
          resolve(JSON.parse(xhr.responseText));
        } catch {
          reject(new ApiError('The service sent an answer that could not be read.', 'decode', xhr.status));
        }
      } else {
        reject(errorFrom(xhr.status, xhr.statusText, xhr.responseText));
      }
    });
    xhr.addEventListener('error', () => reject(new ApiError(UNREACHABLE, 'network')));
    xhr.addEventListener('abort', () => reject(new ApiError('The upload was cancelled.', 'abort')));
    xhr.send(form);
  });
}

// One page of calibrations ({calibrations, total, next}): the first page of a search, or the
// page a previous page's `next` link names.
function calibrationPage(q = '', includeArchived = false, next = null) {
  return getJson(next || `/api/v1/calibrations?${new URLSearchParams({ q, include_archived: includeArchived })}`);
}

// Every calibration of a search, following `next` to the last page.
async function allCalibrations(q = '', includeArchived = false) {
  let page = await calibrationPage(q, includeArchived);
  const calibrations = [...page.calibrations];
  while (page.next) {
    page = await calibrationPage(q, includeArchived, page.next);
    calibrations.push(...page.calibrations);
  }
  return calibrations;
}

// Follows a click on a download link of the API with the session's token: a plain link cannot
// send one, so the file is fetched and handed to the browser as a blob. Without a token the
// link works as it is.
export async function downloadWithToken(event) {
  const link = event.target.closest('a[download]');
  if (!link || !session.token() || !link.getAttribute('href')?.startsWith('/api/')) return;
  event.preventDefault();
  try {
    const url = URL.createObjectURL(new Blob([await getBytes(link.getAttribute('href'))]));
    const save = document.createElement('a');
    save.href = url;
    save.download = link.download;
    save.click();
    setTimeout(() => URL.revokeObjectURL(url), 60_000);
  } catch (error) {
    window.alert(error.message);
  }
}

// One page of a calibration's audit trail ({events, next}), newest first.
function auditPage(calibration, next = null) {
  return getJson(next || `/api/v1/audit?${new URLSearchParams({ calibration })}`);
}

export const api = {
  session: () => getJson('/api/v1/session'),
  auditPage,
  calibrationPage,
  allCalibrations,
  calibration: (id) => getJson(`/api/v1/calibrations/${encodeURIComponent(id)}`),
  exportUrl: (id) => `/api/v1/calibrations/${encodeURIComponent(id)}/export`,
  archive: (id) => postJson(`/api/v1/calibrations/${encodeURIComponent(id)}/archive`),
  restore: (id) => postJson(`/api/v1/calibrations/${encodeURIComponent(id)}/restore`),
  createCalibration: (form, onProgress) => postForm('/api/v1/calibrations', form, onProgress),
  createOrderMap: (form, onProgress) => postForm('/api/v1/order-maps', form, onProgress),
  // The PDF report of a stored map (`body`: the stress fields, options, `polyline`), as bytes.
  report: (id, body) => postBody(`${mapUrl(id)}/report`, body, { bytes: true }),
  // A stored map's description with σ1 − σ2 figures and links through f_σ (N/mm) and h (mm).
  stressOf: (id, fringeValue, thickness) =>
    getJson(`${mapUrl(id)}?${new URLSearchParams({ fringe_value_n_per_mm: fringeValue, thickness_mm: thickness })}`),
  boundary: (id, body) => postBody(`${mapUrl(id)}/boundary`, body),
  comparison: (id, body) => postBody(`${mapUrl(id)}/comparison`, body),
  comparisonMap: (id, body) => postBody(`${mapUrl(id)}/comparison?format=npy`, body, { bytes: true }),
  series: (form, onProgress) => postForm('/api/v1/series', form, onProgress),
};
