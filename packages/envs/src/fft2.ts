/**
 * Batched 2-D real FFT on a doubly periodic grid, built on the 1-D transforms of `fft.ts`.
 *
 * Grid and layouts (C = number of fields in the batch, e.g. fields x copies; batch fastest,
 * as in `fft.ts` and the ETDRK4 stepper):
 *   physical  [ny][nx][C]   value of field c at grid point (x_i, y_j) at (j*nx + i)*C + c
 *   spectral  [nky][nx][C]  coefficient (mx, my) of field c at (my*nx + ix)*C + c,
 *             nky = ny/2 + 1, my = 0..ny/2 (half spectrum in y: the other half is the
 *             complex conjugate), ix = 0..nx-1 in FFT order (mx = ix for ix <= nx/2,
 *             ix - nx above). Mode index k = my*nx + ix, so a spectral array is [modes][C].
 *
 * Conventions (those of `fft.ts`): forward unnormalised,
 *   F(mx, my) = sum_{i,j} f(i, j) exp(-2 pi i (mx i / nx + my j / ny)),
 * inverse scaled by 1/(nx ny), so inverse(forward(f)) = f. Grid point (i, j) sits at
 * x = i Lx / nx, y = j Ly / ny; physical wavenumbers are kx = 2 pi mx / Lx, ky = 2 pi my / Ly.
 * Parseval: sum_{i,j} f^2 = (1/(nx ny)) sum over the full spectrum |F|^2, where in the
 * half spectrum the entries 0 < my < ny/2 count twice.
 *
 * Algorithm: a real transform along y (the slow physical index: a batch of nx*C lines,
 * contiguous, batch loop innermost) writes the half spectrum straight into [nky][nx][C];
 * then, for each my, a complex transform along x of the C lines of that row (the 1-D
 * transform's stride form: element ix of line c at (my*nx + ix)*C + c). No transposes and
 * no work arrays (measured faster than transposing to one big batch).
 *
 * Band limit in y (`myKeep`, default nky): a dealiased solver never needs modes my >=
 * myKeep, so the forward transform writes zeros there and the inverse treats them as
 * zero; the x transforms then run over myKeep rows only.
 */
import { ComplexFft, RealFft } from './fft';

export class Fft2 {
  readonly nx: number;
  readonly ny: number;
  /** ny/2 + 1 half-spectrum entries in y. */
  readonly nky: number;
  /** Modes my < myKeep are transformed along x; the others are zero (see module comment). */
  readonly myKeep: number;
  private readonly rfft: RealFft;
  private readonly cfft: ComplexFft;

  constructor(nx: number, ny: number, myKeep = ny / 2 + 1) {
    this.cfft = new ComplexFft(nx);
    this.rfft = new RealFft(ny);
    this.nx = nx;
    this.ny = ny;
    this.nky = ny / 2 + 1;
    if (!Number.isInteger(myKeep) || myKeep < 1 || myKeep > this.nky) {
      throw new Error(`Fft2: myKeep must be an integer in [1, ny/2+1 = ${this.nky}], got ${myKeep}`);
    }
    this.myKeep = myKeep;
  }

  /** Entries of one field's physical array (nx ny) and of one field's half spectrum (nx nky). */
  get physicalSize(): number {
    return this.nx * this.ny;
  }
  get spectralSize(): number {
    return this.nx * this.nky;
  }

  private check(phys: Float64Array, re: Float64Array, im: Float64Array, fields: number): void {
    if (!Number.isInteger(fields) || fields < 1) throw new Error(`Fft2: fields must be an integer >= 1, got ${fields}`);
    const np = this.nx * this.ny * fields;
    const ns = this.nx * this.nky * fields;
    if (phys.length < np) throw new Error(`Fft2: physical array too short: need ${np} (${this.ny}x${this.nx}x${fields}), got ${phys.length}`);
    if (re.length < ns || im.length < ns) {
      throw new Error(`Fft2: spectral arrays too short: need ${ns} (${this.nky}x${this.nx}x${fields}), got re ${re.length}, im ${im.length}`);
    }
  }

  /** Half spectra [nky][nx][C] of `fields` real fields stored [ny][nx][C]. `phys` is not modified. */
  forward(phys: Float64Array, re: Float64Array, im: Float64Array, fields = 1): void {
    this.check(phys, re, im, fields);
    const { nx, nky, myKeep } = this;
    const C = fields;
    const row = nx * C;
    this.rfft.forward(phys, re, im, row); // [nky][nx][C]
    if (myKeep < nky) {
      re.fill(0, myKeep * row, nky * row);
      im.fill(0, myKeep * row, nky * row);
    }
    for (let my = 0; my < myKeep; my++) this.cfft.forward(re, im, C, C, my * row);
  }

  /**
   * Real fields [ny][nx][C] from half spectra [nky][nx][C], scaled by 1/(nx ny).
   * Destroys `re` and `im` (the x transforms run in place; rows my >= myKeep are zeroed).
   */
  inverseInPlace(re: Float64Array, im: Float64Array, phys: Float64Array, fields = 1): void {
    this.check(phys, re, im, fields);
    const { nx, nky, myKeep } = this;
    const C = fields;
    const row = nx * C;
    for (let my = 0; my < myKeep; my++) this.cfft.inverse(re, im, C, C, my * row);
    if (myKeep < nky) {
      re.fill(0, myKeep * row, nky * row);
      im.fill(0, myKeep * row, nky * row);
    }
    this.rfft.inverse(re, im, phys, row);
  }
}
