/*
 * lo_spline.h -- 2-D tables as tensor-product natural cubic splines.
 *
 * A table z(x, y) is given on strictly increasing knots x[0..nx-1] and
 * y[0..ny-1] (2 <= nx, ny <= LO_SPLINE_MAX_KNOTS), values row-major
 * z[i*ny + j] = z(x[i], y[j]).  lo_table2d_setup computes, once, the 16
 * polynomial coefficients of every cell; lo_table2d_eval then costs two
 * binary searches and one 4x4 contraction, with no allocation.
 *
 * The interpolant is the tensor product of the natural cubic spline operator
 * along x with the one along y, i.e. the same as: spline every column along x,
 * evaluate at x, spline the resulting values along y, evaluate at y.  It is C2
 * inside the table.  Outside the knot range each axis is extended linearly
 * with the end value and end slope; because a natural spline has zero second
 * derivative at its end knots the extension keeps the interpolant C2.
 *
 * References: C. de Boor (1978), "A Practical Guide to Splines", Springer,
 * ch. IV (cubic spline interpolation) and ch. XVII (tensor products).
 */
#ifndef LO_SPLINE_H
#define LO_SPLINE_H

#include <stddef.h>

#define LO_SPLINE_MAX_KNOTS 32

typedef struct {
    int nx, ny;
    const double *x, *y;
    double *coef; /* (nx-1)*(ny-1)*16 numbers, see LO_TABLE2D_COEFS */
} lo_table2d;

#define LO_TABLE2D_COEFS(nx, ny) ((size_t)((nx) - 1) * (size_t)((ny) - 1) * 16u)

/* Second derivatives M of the natural cubic spline through (x[k], f[k*stride]).
 * Solves the symmetric tridiagonal system by the Thomas algorithm. Returns 0 on bad knots. */
static int lo_spline_second_derivatives(int n, const double *x, const double *f, size_t stride,
                                        double *M) {
    double c[LO_SPLINE_MAX_KNOTS], d[LO_SPLINE_MAX_KNOTS];
    int k;
    if (n < 2 || n > LO_SPLINE_MAX_KNOTS) return 0;
    for (k = 0; k + 1 < n; k++)
        if (!(x[k + 1] > x[k])) return 0;
    M[0] = 0.0;
    M[n - 1] = 0.0;
    if (n == 2) return 1;
    /* rows k = 1..n-2: h[k-1] M[k-1] + 2(h[k-1]+h[k]) M[k] + h[k] M[k+1] = 6 (s[k] - s[k-1]) */
    for (k = 1; k <= n - 2; k++) {
        double hl = x[k] - x[k - 1], hr = x[k + 1] - x[k];
        double rhs = 6.0 * ((f[(size_t)(k + 1) * stride] - f[(size_t)k * stride]) / hr -
                            (f[(size_t)k * stride] - f[(size_t)(k - 1) * stride]) / hl);
        double diag = 2.0 * (hl + hr);
        if (k > 1) {
            diag -= hl * c[k - 1];
            rhs -= hl * d[k - 1];
        }
        c[k] = hr / diag;
        d[k] = rhs / diag;
    }
    M[n - 2] = d[n - 2];
    for (k = n - 3; k >= 1; k--) M[k] = d[k] - c[k] * M[k + 1];
    return 1;
}

/* Coefficient a (0..3) of cell p of the spline with values f (stride) and second derivatives M:
 * s(t) = sum_a c_a (t - x[p])^a on [x[p], x[p+1]]. */
static double lo_spline_cell_coef(const double *x, const double *f, size_t stride, const double *M,
                                  int p, int a) {
    double h = x[p + 1] - x[p];
    double f0 = f[(size_t)p * stride], f1 = f[(size_t)(p + 1) * stride];
    switch (a) {
    case 0: return f0;
    case 1: return (f1 - f0) / h - h * (2.0 * M[p] + M[p + 1]) / 6.0;
    case 2: return 0.5 * M[p];
    default: return (M[p + 1] - M[p]) / (6.0 * h);
    }
}

/* Precompute the cell coefficients. coef must hold LO_TABLE2D_COEFS(nx, ny) doubles.
 * Returns 0 when the knots are not strictly increasing or too many. */
static int lo_table2d_setup(lo_table2d *t, int nx, const double *x, int ny, const double *y,
                            const double *z, double *coef) {
    double Mx[LO_SPLINE_MAX_KNOTS * LO_SPLINE_MAX_KNOTS]; /* Mx[j*nx + i] */
    double g[LO_SPLINE_MAX_KNOTS], My[LO_SPLINE_MAX_KNOTS];
    int j, p, q, a, b;
    if (nx < 2 || ny < 2 || nx > LO_SPLINE_MAX_KNOTS || ny > LO_SPLINE_MAX_KNOTS) return 0;
    t->nx = nx; t->ny = ny; t->x = x; t->y = y; t->coef = coef;
    /* splines along x, one per column j */
    for (j = 0; j < ny; j++)
        if (!lo_spline_second_derivatives(nx, x, z + j, (size_t)ny, Mx + (size_t)j * nx)) return 0;
    /* for each x cell p and power a: spline the x-coefficients along y */
    for (p = 0; p < nx - 1; p++) {
        for (a = 0; a < 4; a++) {
            for (j = 0; j < ny; j++)
                g[j] = lo_spline_cell_coef(x, z + j, (size_t)ny, Mx + (size_t)j * nx, p, a);
            if (!lo_spline_second_derivatives(ny, y, g, 1, My)) return 0;
            for (q = 0; q < ny - 1; q++)
                for (b = 0; b < 4; b++)
                    coef[(((size_t)p * (ny - 1) + q) * 4 + a) * 4 + b] =
                        lo_spline_cell_coef(y, g, 1, My, q, b);
        }
    }
    return 1;
}

/* Cell index and the basis (value and slope) along one axis, with linear extension. */
static int lo_spline_basis(int n, const double *x, double t, double w[4], double dw[4]) {
    int lo = 0, hi = n - 1;
    double h, d;
    if (t < x[0]) {
        d = t - x[0];
        w[0] = 1.0; w[1] = d; w[2] = 0.0; w[3] = 0.0;
        dw[0] = 0.0; dw[1] = 1.0; dw[2] = 0.0; dw[3] = 0.0;
        return 0;
    }
    if (t > x[n - 1]) {
        h = x[n - 1] - x[n - 2];
        d = t - x[n - 1];
        w[0] = 1.0; w[1] = h + d; w[2] = h * h + 2.0 * h * d; w[3] = h * h * h + 3.0 * h * h * d;
        dw[0] = 0.0; dw[1] = 1.0; dw[2] = 2.0 * h; dw[3] = 3.0 * h * h;
        return n - 2;
    }
    while (hi - lo > 1) { /* x[lo] <= t <= x[hi] */
        int mid = (lo + hi) / 2;
        if (x[mid] <= t) lo = mid; else hi = mid;
    }
    d = t - x[lo];
    w[0] = 1.0; w[1] = d; w[2] = d * d; w[3] = d * d * d;
    dw[0] = 0.0; dw[1] = 1.0; dw[2] = 2.0 * d; dw[3] = 3.0 * d * d;
    return lo;
}

/* Value at (x, y); the partial derivatives are written when the pointers are not NULL. */
static double lo_table2d_eval(const lo_table2d *t, double x, double y, double *dzdx, double *dzdy) {
    double wx[4], dwx[4], wy[4], dwy[4];
    double z = 0.0, zx = 0.0, zy = 0.0;
    int p = lo_spline_basis(t->nx, t->x, x, wx, dwx);
    int q = lo_spline_basis(t->ny, t->y, y, wy, dwy);
    const double *c = t->coef + ((size_t)p * (t->ny - 1) + q) * 16;
    int a, b;
    for (a = 0; a < 4; a++) {
        double row = 0.0, drow = 0.0;
        for (b = 0; b < 4; b++) {
            row += c[a * 4 + b] * wy[b];
            drow += c[a * 4 + b] * dwy[b];
        }
        z += wx[a] * row;
        zx += dwx[a] * row;
        zy += wx[a] * drow;
    }
    if (dzdx) *dzdx = zx;
    if (dzdy) *dzdy = zy;
    return z;
}

#endif /* LO_SPLINE_H */
