// Reading NPY files (NumPy's array format) as the service writes them: 2-D, C order,
// little-endian float32 ('<f4') or unsigned bytes ('|u1').

const TYPES = {
  '<f4': (buffer, offset, count) => new Float32Array(buffer.slice(offset, offset + count * 4)),
  '|u1': (buffer, offset, count) => new Uint8Array(buffer, offset, count),
};

// Returns {shape: [rows, cols], data} or throws an Error naming what is wrong.
export function parseNpy(buffer) {
  const bytes = new Uint8Array(buffer);
  const magic = [0x93, 0x4e, 0x55, 0x4d, 0x50, 0x59]; // \x93NUMPY
  if (bytes.length < 10 || magic.some((m, i) => bytes[i] !== m)) {
    throw new Error('not an NPY file');
  }
  const view = new DataView(buffer);
  const major = bytes[6];
  let headerLength;
  let start;
  if (major === 1) {
    headerLength = view.getUint16(8, true);
    start = 10;
  } else if (major === 2 || major === 3) {
    headerLength = view.getUint32(8, true);
    start = 12;
  } else {
    throw new Error(`NPY version ${major} is not supported`);
  }
  const header = new TextDecoder('latin1').decode(bytes.subarray(start, start + headerLength));
  const descr = /'descr':\s*'([^']+)'/.exec(header)?.[1];
  const fortran = /'fortran_order':\s*(True|False)/.exec(header)?.[1];
  const shapeText = /'shape':\s*\(([^)]*)\)/.exec(header)?.[1];
  if (!descr || !fortran || shapeText === undefined) throw new Error('NPY header is incomplete');
  if (fortran !== 'False') throw new Error('NPY array is not in C order');
  const read = TYPES[descr];
  if (!read) throw new Error(`NPY element type ${descr} is not supported`);
  const shape = shapeText.split(',').map((s) => s.trim()).filter(Boolean).map(Number);
  if (shape.length !== 2 || shape.some((n) => !Number.isInteger(n) || n < 0)) {
    throw new Error(`expected a 2-D array, got shape (${shapeText})`);
  }
  const count = shape[0] * shape[1];
  const offset = start + headerLength;
  const size = descr === '<f4' ? 4 : 1;
  if (bytes.length - offset !== count * size) throw new Error('NPY data length does not match its shape');
  return { shape, data: read(buffer, offset, count) };
}
