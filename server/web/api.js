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

// Builds an ApiError from a response body (text) and HTTP status: the service's
// {"error":{"code","message"}} when present, otherwise a plain description of the status.
function errorFrom(status, statusText, body) {
  try {
    const parsed = JSON.parse(body);
    if (parsed && parsed.error && typeof parsed.error.message === 'string') {
      return new ApiError(parsed.error.message, parsed.error.code || 'error', status);
    }
  } catch {
    // not JSON: fall through to the generic message
  }
  const what = statusText ? `${status} ${statusText}` : `status ${status}`;
  return new ApiError(`The service answered ${what}.`, 'http', status);
}

async function send(url, init) {
  let response;
  try {
    response = await fetch(url, init);
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

// POSTs multipart form data with XMLHttpRequest so that upload progress can be reported:
// onProgress(fraction) while the body is sent, then onProgress(null) while the service works.
export function postForm(url, form, onProgress) {
  return new Promise((resolve, reject) => {
    const xhr = new XMLHttpRequest();
    xhr.open('POST', url);
    xhr.setRequestHeader('Accept', 'application/json');
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

export const api = {
  calibrationPage,
  allCalibrations,
  calibration: (id) => getJson(`/api/v1/calibrations/${encodeURIComponent(id)}`),
  exportUrl: (id) => `/api/v1/calibrations/${encodeURIComponent(id)}/export`,
  archive: (id) => postJson(`/api/v1/calibrations/${encodeURIComponent(id)}/archive`),
  restore: (id) => postJson(`/api/v1/calibrations/${encodeURIComponent(id)}/restore`),
  createCalibration: (form, onProgress) => postForm('/api/v1/calibrations', form, onProgress),
  createOrderMap: (form, onProgress) => postForm('/api/v1/order-maps', form, onProgress),
};
