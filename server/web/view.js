// A canvas that shows a picture scaled to fit, reports pointer positions in the picture's
// pixel-edge coordinates (x right, y down; pixel (x, y) covers [x, x+1) × [y, y+1)) and offers a
// keyboard cursor so that everything done with the mouse can also be done with the keys:
// arrows move (Shift: ten times farther), Enter or Space acts as a click, Escape cancels,
// Backspace undoes the tool's last step.
//
// The page supplies a tool: {hover(p), press(p), drag(p), release(p), cancel(), undo(), leave()},
// every method optional, and an overlay(ctx, toScreen, scale) painter.
//
// The picture is fitted into `box` (default: the canvas's parent) less `reserve` CSS pixels of
// its width (a number, or a function read at each fit), and no taller than maxHeight().

export class ImageView {
  constructor(canvas, { maxHeight, box = canvas.parentElement, reserve = 0 }) {
    this.canvas = canvas;
    this.ctx = canvas.getContext('2d');
    this.maxHeight = maxHeight;
    this.box = box;
    this.reserve = reserve;
    this.source = null;
    this.width = 0;
    this.height = 0;
    this.scale = 1;
    this.tool = {};
    this.overlay = null;
    this.cursor = null; // keyboard cursor, image coordinates
    this.pressed = false;
    this.showCursor = false;

    canvas.addEventListener('pointerdown', (e) => this.onPointer(e, 'press'));
    canvas.addEventListener('pointermove', (e) => this.onPointer(e, this.pressed ? 'drag' : 'hover'));
    canvas.addEventListener('pointerup', (e) => this.onPointer(e, 'release'));
    canvas.addEventListener('pointerleave', () => this.call('leave'));
    canvas.addEventListener('keydown', (e) => this.onKey(e));
    canvas.addEventListener('focus', () => {
      this.showCursor = true;
      if (!this.cursor && this.source) this.cursor = { x: this.width / 2, y: this.height / 2 };
      if (this.cursor) this.call('hover', this.cursor);
      this.draw();
    });
    canvas.addEventListener('blur', () => {
      this.showCursor = false;
      this.draw();
    });
    new ResizeObserver(() => this.fit()).observe(box);
  }

  // Shows `source` (an image, bitmap or canvas) of width × height pixels; null clears the view.
  setSource(source, width, height) {
    const sizeChanged = width !== this.width || height !== this.height;
    this.source = source;
    this.width = source ? width : 0;
    this.height = source ? height : 0;
    if (sizeChanged) this.cursor = null;
    this.fit();
  }

  setTool(tool) {
    this.pressed = false;
    this.tool = tool || {};
    this.draw();
  }

  fit() {
    const reserve = typeof this.reserve === 'function' ? this.reserve() : this.reserve;
    const box = this.box.clientWidth - reserve;
    if (!this.source || box <= 0) {
      this.canvas.width = 0;
      this.canvas.height = 0;
      this.canvas.style.width = '';
      this.canvas.style.height = '';
      this.canvas.classList.toggle('empty-view', !this.source);
      return;
    }
    this.canvas.classList.remove('empty-view');
    this.scale = Math.min(box / this.width, this.maxHeight() / this.height);
    const cssW = Math.max(1, Math.floor(this.width * this.scale));
    const cssH = Math.max(1, Math.floor(this.height * this.scale));
    const dpr = window.devicePixelRatio || 1;
    this.canvas.style.width = `${cssW}px`;
    this.canvas.style.height = `${cssH}px`;
    this.canvas.width = Math.round(cssW * dpr);
    this.canvas.height = Math.round(cssH * dpr);
    this.draw();
  }

  toScreen = (p) => ({ x: p.x * this.scale, y: p.y * this.scale });

  toImage(event) {
    const rect = this.canvas.getBoundingClientRect();
    const x = ((event.clientX - rect.left) / rect.width) * this.width;
    const y = ((event.clientY - rect.top) / rect.height) * this.height;
    return { x: Math.min(this.width, Math.max(0, x)), y: Math.min(this.height, Math.max(0, y)) };
  }

  call(method, p) {
    const fn = this.tool[method];
    if (fn) fn.call(this.tool, p);
    this.draw();
  }

  onPointer(event, kind) {
    if (!this.source) return;
    if (kind === 'press') {
      if (event.button !== 0) return;
      this.pressed = true;
      this.canvas.setPointerCapture(event.pointerId);
      this.canvas.focus({ preventScroll: true });
    }
    if (kind === 'release') {
      if (!this.pressed) return;
      this.pressed = false;
    }
    const p = this.toImage(event);
    this.cursor = p;
    this.call(kind, p);
  }

  onKey(event) {
    if (!this.source) return;
    const step = (event.shiftKey ? 10 : 1) * Math.max(1, 1 / this.scale);
    const moves = { ArrowLeft: [-1, 0], ArrowRight: [1, 0], ArrowUp: [0, -1], ArrowDown: [0, 1] };
    const c = this.cursor || { x: this.width / 2, y: this.height / 2 };
    if (moves[event.key]) {
      const [dx, dy] = moves[event.key];
      // The cursor rests on pixel centres.
      const x = Math.floor(c.x + dx * step) + 0.5;
      const y = Math.floor(c.y + dy * step) + 0.5;
      this.cursor = { x: Math.min(this.width - 0.5, Math.max(0.5, x)), y: Math.min(this.height - 0.5, Math.max(0.5, y)) };
      this.call('hover', this.cursor);
    } else if (event.key === 'Enter' || event.key === ' ') {
      this.cursor = c;
      this.call('press', c);
      this.call('release', c);
    } else if (event.key === 'Escape') {
      this.call('cancel');
    } else if (event.key === 'Backspace') {
      this.call('undo');
    } else {
      return;
    }
    event.preventDefault();
  }

  draw() {
    const { ctx, canvas } = this;
    if (!this.source || canvas.width === 0) return;
    const dpr = canvas.width / parseFloat(canvas.style.width);
    ctx.setTransform(1, 0, 0, 1, 0, 0);
    ctx.clearRect(0, 0, canvas.width, canvas.height);
    ctx.imageSmoothingEnabled = this.scale < 1;
    ctx.drawImage(this.source, 0, 0, canvas.width, canvas.height);
    ctx.setTransform(dpr, 0, 0, dpr, 0, 0);
    if (this.overlay) this.overlay(ctx, this.toScreen, this.scale);
    if (this.showCursor && this.cursor) {
      const { x, y } = this.toScreen(this.cursor);
      ctx.lineWidth = 1;
      for (const [colour, off] of [['#000', 1], ['#fff', 0]]) {
        ctx.strokeStyle = colour;
        ctx.beginPath();
        ctx.moveTo(x - 9 + off, y + off);
        ctx.lineTo(x + 9 + off, y + off);
        ctx.moveTo(x + off, y - 9 + off);
        ctx.lineTo(x + off, y + 9 + off);
        ctx.stroke();
      }
    }
  }
}

// Decodes an image file for display. Resolves to {bitmap, width, height}; rejects with a readable
// Error when the browser cannot show this kind of file (TIFF, for one).
export async function decodeImage(file) {
  try {
    // The service reads pixels as stored, so orientation tags are ignored here too.
    const bitmap = await createImageBitmap(file, { imageOrientation: 'none' });
    return { bitmap, width: bitmap.width, height: bitmap.height };
  } catch {
    throw new Error(`This browser cannot display “${file.name}”. Use PNG or JPEG to draw on the photo.`);
  }
}

// Draws a closed or open polyline through image points.
export function tracePath(ctx, toScreen, points, close) {
  ctx.beginPath();
  points.forEach((p, i) => {
    const s = toScreen(p);
    if (i === 0) ctx.moveTo(s.x, s.y);
    else ctx.lineTo(s.x, s.y);
  });
  if (close) ctx.closePath();
}

// Strokes the current path twice (dark under light) so that it shows on any background.
export function strokeBoth(ctx, width = 2, light = '#ffd23f') {
  ctx.lineWidth = width + 2;
  ctx.strokeStyle = 'rgba(0,0,0,0.8)';
  ctx.stroke();
  ctx.lineWidth = width;
  ctx.strokeStyle = light;
  ctx.stroke();
}

// A small marker (a ring) at an image point.
export function marker(ctx, toScreen, p, radius = 5, light = '#ffd23f') {
  const s = toScreen(p);
  ctx.beginPath();
  ctx.arc(s.x, s.y, radius, 0, Math.PI * 2);
  strokeBoth(ctx, 2, light);
}

// A gesture that defines two points, shared by the rectangle and line tools: drag from the first
// to the second, or click (Enter) once for each. onChange(a, b, done) reports every change;
// done is true once the second point is fixed.
export class TwoPointGesture {
  constructor(onChange) {
    this.onChange = onChange;
    this.anchor = null; // first point while the button is down
    this.pending = null; // first point after a click, waiting for the second
    this.moved = false;
    this.finished = false;
  }

  press(p) {
    if (this.pending) {
      this.onChange(this.pending, p, true);
      this.pending = null;
      this.finished = true;
    } else {
      this.anchor = p;
      this.moved = false;
    }
  }

  drag(p) {
    if (!this.anchor) return;
    this.moved = true;
    this.onChange(this.anchor, p, false);
  }

  release(p) {
    if (this.finished) {
      this.finished = false;
    } else if (this.anchor && this.moved) {
      this.onChange(this.anchor, p, true);
    } else if (this.anchor) {
      this.pending = this.anchor;
    }
    this.anchor = null;
  }

  hover(p) {
    if (this.pending) this.onChange(this.pending, p, false);
  }

  cancel() {
    this.anchor = null;
    this.pending = null;
  }
}
