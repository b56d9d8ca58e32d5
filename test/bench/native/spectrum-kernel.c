/*
 * The optics benchmark's loop written as plain scalar C, as the yardstick for the TypeScript
 * kernel (src/model/optics/optical-model.ts): the same stack, grid, angle and polarisation, the
 * same precomputed per-material constants, the same characteristic-matrix product.
 * (C99 complex products compile to plain multiplies with -fcx-limited-range.)
 * Build: cc -O2 -fcx-limited-range -o spectrum-kernel spectrum-kernel.c -lm. Prints evaluations per second.
 */
#include <complex.h>
#include <math.h>
#include <stdio.h>
#include <time.h>

#define LAYERS 100
#define POINTS 2000

static double now(void) {
  struct timespec t;
  clock_gettime(CLOCK_MONOTONIC, &t);
  return t.tv_sec + 1e-9 * t.tv_nsec;
}

/* q = N cos(theta) with the decaying branch, N = n - ik. */
static double complex q_of(double n, double k, double s0) {
  double complex q = csqrt((n - I * k) * (n - I * k) - s0 * s0);
  if (cimag(q) > 0) q = -q;
  return q;
}

int main(void) {
  const double angle = 45.0 * M_PI / 180.0, s0 = sin(angle);
  double complex qH[POINTS], qL[POINTS], invH[POINTS], invL[POINTS], qS, eta0 = cos(angle);
  double k0[POINTS], d[LAYERS], R[POINTS];
  int isH[LAYERS];
  for (int w = 0; w < POINTS; w++) {
    double lambda = 400.0 + 0.3 * w;
    k0[w] = 2 * M_PI / lambda;
    qH[w] = q_of(2.35, 2e-4, s0);
    qL[w] = q_of(1.46, 0, s0);
    invH[w] = 1 / qH[w];
    invL[w] = 1 / qL[w];
  }
  qS = q_of(1.52, 0, s0);
  for (int j = 0; j < LAYERS; j++) {
    isH[j] = (j % 2) == 0;
    d[j] = isH[j] ? 58.5 : 94.2;
  }
  double checksum = 0;
  int reps = 0;
  double t0 = now(), t;
  do {
    for (int w = 0; w < POINTS; w++) {
      double complex a11 = 1, a12 = 0, a21 = 0, a22 = 1;
      for (int j = 0; j < LAYERS; j++) {
        /* Scalar arithmetic, as in the TypeScript kernel. */
        double complex q = isH[j] ? qH[w] : qL[w];
        double phase = k0[w] * d[j], dr = phase * creal(q), di = phase * cimag(q);
        double cr = cos(dr), sr = sin(dr), cre = cr, cim = 0, sre = sr, sim = 0;
        if (di != 0) {
          double e = exp(di), ei = 1 / e, ch = 0.5 * (e + ei), sh = 0.5 * (e - ei);
          cre = cr * ch; cim = -sr * sh; sre = sr * ch; sim = cr * sh;
        }
        double complex c = cre + I * cim, s = -sim + I * sre; /* i sin(delta) */
        double complex inv = isH[j] ? invH[w] : invL[w];
        double complex u = s * inv, v = s * q; /* s-polarised: eta = q */
        double complex n11 = c * a11 + u * a21, n12 = c * a12 + u * a22;
        double complex n21 = v * a11 + c * a21, n22 = v * a12 + c * a22;
        a11 = n11; a12 = n12; a21 = n21; a22 = n22;
      }
      double complex B = a11 + a12 * qS, C = a21 + a22 * qS;
      double complex r = (eta0 * B - C) / (eta0 * B + C);
      R[w] = creal(r * conj(r));
    }
    checksum += R[POINTS / 2];
    reps++;
    t = now();
  } while (t - t0 < 2.0);
  printf("%.6e %.17g\n", (double)reps * LAYERS * POINTS / (t - t0), checksum / reps);
  return 0;
}
