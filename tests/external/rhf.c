/* A small closed-shell Hartree-Fock program in C, run by the harness as an external code.
 *
 *   rhf INTEGRALS SOLUTION
 *
 * INTEGRALS is a text file of numbers separated by white space, in atomic units (Eh):
 *   nao nocc e_nuc convergence
 *   S (nao*nao, row-major)  H = T + V (nao*nao)  (pq|rs) (nao^4, chemists' notation)
 * SOLUTION is written as JSON (format scf-harness-solution/1): energy (Eh, including
 * e_nuc), coefficients, occupations, orbital_energies, density, fock, converged,
 * iterations.
 *
 * Method: Loewdin orthogonalisation X = S^-1/2, core-Hamiltonian guess, plain Roothaan
 * iterations (no DIIS) until max|X (F P S - S P F) X| < convergence / 10, with
 * F = H + J(P) - K(P)/2, P = 2 C_occ C_occ^T, E = e_nuc + Tr(P (H + F)) / 2.
 * Symmetric eigenproblems by cyclic Jacobi rotations (fine for a few dozen AOs).
 * Exit status 2 on unreadable input, 3 if not converged in MAX_ITER iterations.
 */
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#define MAX_ITER 500

static int n;

static double *mat(void) { return calloc((size_t)n * n, sizeof(double)); }

static void matmul(const double *a, const double *b, double *c) {
    for (int i = 0; i < n; i++)
        for (int j = 0; j < n; j++) {
            double s = 0.0;
            for (int k = 0; k < n; k++) s += a[i * n + k] * b[k * n + j];
            c[i * n + j] = s;
        }
}

/* Eigen-decomposition of the symmetric a (destroyed): a = v diag(w) v^T, ascending w. */
static void jacobi(double *a, double *w, double *v) {
    for (int i = 0; i < n * n; i++) v[i] = 0.0;
    for (int i = 0; i < n; i++) v[i * n + i] = 1.0;
    for (int sweep = 0; sweep < 100; sweep++) {
        double off = 0.0;
        for (int p = 0; p < n; p++)
            for (int q = p + 1; q < n; q++) off += a[p * n + q] * a[p * n + q];
        if (off < 1e-30) break;
        for (int p = 0; p < n; p++)
            for (int q = p + 1; q < n; q++) {
                double apq = a[p * n + q];
                if (fabs(apq) < 1e-300) continue;
                double theta = (a[q * n + q] - a[p * n + p]) / (2.0 * apq);
                double t = (theta >= 0 ? 1.0 : -1.0) / (fabs(theta) + sqrt(theta * theta + 1.0));
                double c = 1.0 / sqrt(t * t + 1.0), s = t * c;
                for (int k = 0; k < n; k++) {
                    double akp = a[k * n + p], akq = a[k * n + q];
                    a[k * n + p] = c * akp - s * akq;
                    a[k * n + q] = s * akp + c * akq;
                }
                for (int k = 0; k < n; k++) {
                    double apk = a[p * n + k], aqk = a[q * n + k];
                    a[p * n + k] = c * apk - s * aqk;
                    a[q * n + k] = s * apk + c * aqk;
                }
                for (int k = 0; k < n; k++) {
                    double vkp = v[k * n + p], vkq = v[k * n + q];
                    v[k * n + p] = c * vkp - s * vkq;
                    v[k * n + q] = s * vkp + c * vkq;
                }
            }
    }
    for (int i = 0; i < n; i++) w[i] = a[i * n + i];
    for (int i = 0; i < n; i++) { /* selection sort, ascending */
        int m = i;
        for (int j = i + 1; j < n; j++) if (w[j] < w[m]) m = j;
        if (m != i) {
            double t = w[i]; w[i] = w[m]; w[m] = t;
            for (int k = 0; k < n; k++) { t = v[k * n + i]; v[k * n + i] = v[k * n + m]; v[k * n + m] = t; }
        }
    }
}

/* Orbitals of F: F' = X F X, F' = U e U^T, C = X U. */
static void orbitals(const double *f, const double *x, double *c, double *e) {
    double *t = mat(), *fp = mat(), *u = mat();
    matmul(x, f, t);
    matmul(t, x, fp);
    jacobi(fp, e, u);
    matmul(x, u, c);
    free(t); free(fp); free(u);
}

static void density(const double *c, int nocc, double *p) {
    for (int i = 0; i < n; i++)
        for (int j = 0; j < n; j++) {
            double s = 0.0;
            for (int k = 0; k < nocc; k++) s += c[i * n + k] * c[j * n + k];
            p[i * n + j] = 2.0 * s;
        }
}

static void fock(const double *h, const double *eri, const double *p, double *f) {
    size_t n2 = (size_t)n * n, n3 = n2 * n;
    for (int a = 0; a < n; a++)
        for (int b = 0; b < n; b++) {
            double g = 0.0;
            for (int c = 0; c < n; c++)
                for (int d = 0; d < n; d++)
                    g += p[c * n + d] * (eri[a * n3 + b * n2 + c * n + d]
                                         - 0.5 * eri[a * n3 + c * n2 + b * n + d]);
            f[a * n + b] = h[a * n + b] + g;
        }
}

/* max |X (F P S - S P F) X| */
static double gradient(const double *f, const double *p, const double *s, const double *x) {
    double *fp = mat(), *fps = mat(), *sp = mat(), *spf = mat(), *t = mat(), *g = mat();
    matmul(f, p, fp); matmul(fp, s, fps);
    matmul(s, p, sp); matmul(sp, f, spf);
    for (int i = 0; i < n * n; i++) t[i] = fps[i] - spf[i];
    matmul(x, t, fp); matmul(fp, x, g);
    double m = 0.0;
    for (int i = 0; i < n * n; i++) if (fabs(g[i]) > m) m = fabs(g[i]);
    free(fp); free(fps); free(sp); free(spf); free(t); free(g);
    return m;
}

static void print_matrix(FILE *out, const char *key, const double *a) {
    fprintf(out, "\"%s\": [", key);
    for (int i = 0; i < n; i++) {
        fprintf(out, "%s[", i ? ", " : "");
        for (int j = 0; j < n; j++) fprintf(out, "%s%.17g", j ? ", " : "", a[i * n + j]);
        fprintf(out, "]");
    }
    fprintf(out, "]");
}

int main(int argc, char **argv) {
    if (argc != 3) { fprintf(stderr, "usage: rhf INTEGRALS SOLUTION\n"); return 2; }
    FILE *in = fopen(argv[1], "r");
    if (!in) { fprintf(stderr, "rhf: cannot open %s\n", argv[1]); return 2; }
    int nocc;
    double e_nuc, conv;
    if (fscanf(in, "%d %d %lf %lf", &n, &nocc, &e_nuc, &conv) != 4 || n < 1 || nocc < 1 || nocc > n) {
        fprintf(stderr, "rhf: bad header in %s\n", argv[1]); return 2;
    }
    size_t n4 = (size_t)n * n * n * n;
    double *s = mat(), *h = mat(), *eri = malloc(n4 * sizeof(double));
    for (int i = 0; i < n * n; i++) if (fscanf(in, "%lf", &s[i]) != 1) { fprintf(stderr, "rhf: short S\n"); return 2; }
    for (int i = 0; i < n * n; i++) if (fscanf(in, "%lf", &h[i]) != 1) { fprintf(stderr, "rhf: short H\n"); return 2; }
    for (size_t i = 0; i < n4; i++) if (fscanf(in, "%lf", &eri[i]) != 1) { fprintf(stderr, "rhf: short ERI\n"); return 2; }
    fclose(in);

    double *w = malloc(n * sizeof(double)), *u = mat(), *x = mat(), *t = mat();
    memcpy(t, s, (size_t)n * n * sizeof(double));
    jacobi(t, w, u);
    for (int i = 0; i < n; i++)
        for (int j = 0; j < n; j++) {
            double v = 0.0;
            for (int k = 0; k < n; k++) v += u[i * n + k] * u[j * n + k] / sqrt(w[k]);
            x[i * n + j] = v;
        }

    double *c = mat(), *e = malloc(n * sizeof(double)), *p = mat(), *f = mat();
    orbitals(h, x, c, e);
    density(c, nocc, p);
    int it, converged = 0;
    for (it = 1; it <= MAX_ITER; it++) {
        fock(h, eri, p, f);
        if (gradient(f, p, s, x) < 0.1 * conv) { converged = 1; break; }
        orbitals(f, x, c, e);
        density(c, nocc, p);
    }
    if (!converged) it = MAX_ITER;
    /* report the orbitals of the final Fock matrix, and their density and Fock matrix */
    orbitals(f, x, c, e);
    density(c, nocc, p);
    fock(h, eri, p, f);
    double energy = e_nuc;
    for (int i = 0; i < n * n; i++) energy += 0.5 * p[i] * (h[i] + f[i]);

    FILE *out = fopen(argv[2], "w");
    if (!out) { fprintf(stderr, "rhf: cannot write %s\n", argv[2]); return 2; }
    fprintf(out, "{\"format\": \"scf-harness-solution/1\", \"energy\": %.17g, ", energy);
    print_matrix(out, "coefficients", c);
    fprintf(out, ", \"occupations\": [");
    for (int i = 0; i < n; i++) fprintf(out, "%s%d", i ? ", " : "", i < nocc ? 2 : 0);
    fprintf(out, "], \"orbital_energies\": [");
    for (int i = 0; i < n; i++) fprintf(out, "%s%.17g", i ? ", " : "", e[i]);
    fprintf(out, "], ");
    print_matrix(out, "density", p);
    fprintf(out, ", ");
    print_matrix(out, "fock", f);
    fprintf(out, ", \"converged\": %s, \"iterations\": %d}\n", converged ? "true" : "false", it);
    fclose(out);
    printf("rhf: E = %.12f Eh after %d iterations\n", energy, it);
    return converged ? 0 : 3;
}
