// Small DOM helpers shared by the pages.

export const $ = (id) => {
  const el = document.getElementById(id);
  if (!el) throw new Error(`page element #${id} is missing`);
  return el;
};

// Shows an error's message in an alert element (or hides it for null).
export function showError(el, error) {
  el.hidden = !error;
  el.textContent = error ? error.message || String(error) : '';
  if (error) el.scrollIntoView({ block: 'nearest' });
}

// Fills a <dl> with [term, value] pairs (value: text or a node), skipping empty values.
export function fillDl(dl, pairs) {
  dl.replaceChildren();
  for (const [term, value] of pairs) {
    if (value === undefined || value === null || value === '') continue;
    const dt = document.createElement('dt');
    dt.textContent = term;
    const dd = document.createElement('dd');
    dd.append(value);
    dl.append(dt, dd);
  }
}

// The number typed in an <input>, or null when it is empty. Throws a readable Error (and focuses
// the field) when the text is not a number, or not positive when `positive` is set.
export function numberIn(input, { positive = false, label } = {}) {
  const text = input.value.trim();
  if (text === '' && input.validity.valid) return null;
  const value = Number(text);
  const name = label || input.labels?.[0]?.textContent || input.id;
  if (text === '' || !Number.isFinite(value) || (positive && value <= 0)) {
    input.focus();
    throw new Error(`${name}: enter ${positive ? 'a positive number' : 'a number'}.`);
  }
  return value;
}

// The same, but the field must be filled in.
export function requiredNumber(input, options = {}) {
  const value = numberIn(input, options);
  if (value === null) {
    input.focus();
    const name = options.label || input.labels?.[0]?.textContent || input.id;
    throw new Error(`${name}: this value is needed.`);
  }
  return value;
}

// Drives a <progress> and its text: report(fraction) while uploading, report(null) while the
// service works, done() at the end.
export function progress(bar, label, busyText) {
  return {
    report(fraction) {
      bar.hidden = false;
      if (fraction === null) {
        bar.removeAttribute('value');
        label.textContent = busyText;
      } else {
        bar.value = fraction;
        label.textContent = `Uploading… ${Math.round(fraction * 100)} %`;
      }
    },
    done(text = '') {
      bar.hidden = true;
      bar.value = 0;
      label.textContent = text;
    },
  };
}

// Formats an RFC 3339 time for people, in their locale.
export function when(text) {
  const date = new Date(text);
  return Number.isNaN(date.getTime()) ? text : date.toLocaleString();
}
