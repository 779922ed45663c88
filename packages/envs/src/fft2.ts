/**
 * Batched 2-D real FFT on a doubly periodic grid, built on the 1-D transforms of `fft.ts`.
 *
 * Grid and layouts (C = number of fields in the batch, e.g. fields x copies; batch fastest,
 * as in `fft.ts` and the ETDRK4 stepper):
 *   physical  [ny][nx][C]   value of field c at grid point (x_i, y_j) at (j*nx + i)*C + c
 *   spectral  [nx][nky][C]  coefficient (mx, my) of field c at (ix*nky + my)*C + c,
 *             nky = ny/2 + 1, my = 0..ny/2 (half spectrum in y: the other half is the
 *             complex conjugate), ix = 0..nx-1 in FFT order (mx = ix for ix <= nx/2,
 *             ix - nx above). Mode index k = ix*nky + my, so a spectral array is [modes][C].
 * Real and imaginary parts are separate arrays of the same layout.
 *
 * Conventions (those of `fft.ts`): forward unnormalised,
 *   F(mx, my) = sum_{i,j} f(i, j) exp(-2 pi i (mx i / nx + my j / ny)),
 * inverse scaled by 1/(nx ny), so inverse(forward(f)) = f. Grid point (i, j) sits at
 * x = i Lx / nx, y = j Ly / ny; physical wavenumbers are kx = 2 pi mx / Lx, ky = 2 pi my / Ly.
 * Parseval: sum_{i,j} f^2 = (1/(nx ny)) sum over the full spectrum |F|^2, where in the
 * half spectrum the entries 0 < my < ny/2 count twice.
 *
 * Algorithm: a real transform along y (the slow physical index, so the batch of nx*C
 * lines is contiguous and the batch loop innermost), a blocked transpose of the half
 * spectrum to [nx][nky][C], then a complex transform along x with batch nky*C. The
 * inverse runs the same steps backwards. Work arrays are allocated once per field count.
 *
 * Band limit in y (`myKeep`, default nky): a dealiased solver never needs modes my >=
 * myKeep, so the forward transform writes zeros there and the inverse treats them as
 * zero; the x transforms and transposes then run over myKeep columns only (the 1-D
 * complex transform's stride > batch form).
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
  private tRe: Float64Array = new Float64Array(0);
  private tIm: Float64Array = new Float64Array(0);
  /** Inverse work: rows my >= myKeep stay zero forever. */
  private uRe: Float64Array = new Float64Array(0);
  private uIm: Float64Array = new Float64Array(0);

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

  private work(fields: number): void {
    const need = this.nky * fields * this.nx;
    if (this.tRe.length < need) {
      this.tRe = new Float64Array(need);
      this.tIm = new Float64Array(need);
      this.uRe = new Float64Array(need);
      this.uIm = new Float64Array(need);
    }
  }

  private check(phys: Float64Array, re: Float64Array, im: Float64Array, fields: number): void {
    if (!Number.isInteger(fields) || fields < 1) throw new Error(`Fft2: fields must be an integer >= 1, got ${fields}`);
    const np = this.nx * this.ny * fields;
    const ns = this.nx * this.nky * fields;
    if (phys.length < np) throw new Error(`Fft2: physical array too short: need ${np} (${this.ny}x${this.nx}x${fields}), got ${phys.length}`);
    if (re.length < ns || im.length < ns) {
      throw new Error(`Fft2: spectral arrays too short: need ${ns} (${this.nx}x${this.nky}x${fields}), got re ${re.length}, im ${im.length}`);
    }
  }

  /** Half spectra [nx][nky][C] of `fields` real fields stored [ny][nx][C]. `phys` is not modified. */
  forward(phys: Float64Array, re: Float64Array, im: Float64Array, fields = 1): void {
    this.check(phys, re, im, fields);
    this.work(fields);
    const { nx, nky, myKeep } = this;
    const C = fields;
    const tRe = this.tRe;
    const tIm = this.tIm;
    this.rfft.forward(phys, tRe, tIm, nx * C); // [nky][nx][C]
    // Transpose blocks of C: [nky][nx][C] -> [nx][nky][C], columns my < myKeep.
    for (let ky = 0; ky < myKeep; ky++) {
      let s = ky * nx * C;
      for (let ix = 0; ix < nx; ix++) {
        let d = (ix * nky + ky) * C;
        for (let c = 0; c < C; c++, s++, d++) {
          re[d] = tRe[s]!;
          im[d] = tIm[s]!;
        }
      }
    }
    if (myKeep < nky) {
      for (let ix = 0; ix < nx; ix++) {
        re.fill(0, (ix * nky + myKeep) * C, (ix + 1) * nky * C);
        im.fill(0, (ix * nky + myKeep) * C, (ix + 1) * nky * C);
      }
    }
    this.cfft.forward(re, im, myKeep * C, nky * C);
  }

  /**
   * Real fields [ny][nx][C] from half spectra [nx][nky][C], scaled by 1/(nx ny).
   * Destroys `re` and `im` (the x transform runs in place on them).
   */
  inverseInPlace(re: Float64Array, im: Float64Array, phys: Float64Array, fields = 1): void {
    this.check(phys, re, im, fields);
    this.work(fields);
    const { nx, nky, myKeep } = this;
    const C = fields;
    const tRe = this.uRe;
    const tIm = this.uIm;
    this.cfft.inverse(re, im, myKeep * C, nky * C);
    for (let ky = 0; ky < myKeep; ky++) {
      let d = ky * nx * C;
      for (let ix = 0; ix < nx; ix++) {
        let s = (ix * nky + ky) * C;
        for (let c = 0; c < C; c++, s++, d++) {
          tRe[d] = re[s]!;
          tIm[d] = im[s]!;
        }
      }
    }
    this.rfft.inverse(tRe, tIm, phys, nx * C);
  }
}
