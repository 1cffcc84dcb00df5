/* The lower-boundary series of the Wiener first-passage time and what is built from them without the
 * CDF: the Navarro-Fuss small- and large-time series in log space, tensor Gauss sums in the large-time
 * range, boundary probabilities and mean decision times, and their integrals over drift_sd and start_range.
 * The public entry points (wiener.c) and the CDF and variability windows (wiener_cdf.c) both build on these;
 * nothing here calls either, so the engine's files depend on each other one way. docs/methods.md. */
#include "engine/wiener_internal.h"

#include <float.h>
#include <math.h>
#include <string.h>

/* ---- the lower-boundary series ----------------------------------------------------------------- */

static const double LOG_SQRT_2PI = 0.91893853320467274178;

/* Small-time series (u < 0.25). Sums are scaled by exp(w^2 / (2u)) so the k = 0 image is w.
 * Every scaled image term is a product of powers of two exponentials, A = exp(-2(1-w)/u) and
 * B = exp(-2(1+w)/u): the image at w - 2k has exp(-2k(k-w)/u) = A^{k(k+1)/2} B^{k(k-1)/2} and the one
 * at w + 2k has A^{k(k-1)/2} B^{k(k+1)/2}; so the usual case (k <= 1 plus the bound at k = 2) costs two
 * calls to exp. All factors are <= 1: nothing overflows.
 * Returns S0; fills Lu = d log phi / du and Lw = d log phi / dw when want_grad. */
static double small_time(double u, double iu, double w, double d, double eps, int want_grad, double *Lu, double *Lw)
{
    double S0, S3 = 0, Sw = 0;
    double A, B = -1; /* B computed on first use */
    double En, Ep, Ak, Bk;
    int K;
    if (d < 1e-3) {
        /* Start near the far boundary: the k = 0 and k = -1 images cancel; pair them exactly
         * (numerics notes, section 1.3): w + (w-2)exp(-2d/u) without cancellation. */
        double em = expm1(-2 * d * iu);
        A = 1 + em;
        B = exp(-2 * (1 + w) * iu);
        S0 = -em - d * (2 + em);
        double xn = w - 2, xp = w + 2;
        S0 += xp * B;
        if (want_grad) {
            S3 = w * w * w + xn * xn * xn * A + xp * xp * xp * B;
            Sw = (1 - w * w / u) + (1 - xn * xn / u) * A + (1 - xp * xp / u) * B;
        }
        K = 1;
        En = A * A * A * B; /* images for k = 2 */
        Ep = A * B * B * B;
        Ak = A * A;
        Bk = B * B;
    } else {
        A = exp(-2 * d * iu);
        S0 = w;
        if (want_grad) {
            S3 = w * w * w;
            Sw = 1 - w * w / u;
        }
        K = 0;
        En = A; /* images for k = 1 (Ep once B is known) */
        Ep = 0;
        Ak = A;
        Bk = 1;
    }
    for (;; K++) {
        /* Nearest omitted image is x = w - 2(K+1), at distance x0 = 2K + 2 - w >= 1 > sqrt(3u):
         * every tail bound below is valid. Its scaled term is En. */
        double x0 = 2 * K + 2 - w;
        if ((x0 + 0.5 * u) * En <= eps * S0) {
            if (!want_grad) break;
            /* Weight x^3 (d/du) and x^2/u (d/dw): first omitted term plus half the tail integral. */
            double b3 = (x0 * x0 * x0 + 0.5 * u * (x0 * x0 + 2 * u)) * En;
            double bw = (x0 * x0 / u + 0.5 * (x0 + u / x0)) * En;
            if (b3 <= eps * S0 * u && bw <= eps * S0) break;
        }
        if (K > 50) break; /* unreachable for u < 0.25: En < exp(-400) by then */
        if (B < 0) {
            B = exp(-2 * (1 + w) * iu);
            Ep = B;
            Bk = B;
        }
        double kp = K + 1;
        double xn = w - 2 * kp, xp = w + 2 * kp;
        S0 += xn * En + xp * Ep;
        if (want_grad) {
            S3 += xn * xn * xn * En + xp * xp * xp * Ep;
            Sw += (1 - xn * xn / u) * En + (1 - xp * xp / u) * Ep;
        }
        /* step k -> k + 1: En *= A^{k+1} B^k, Ep *= A^k B^{k+1} (Ak = A^k, Bk = B^k) */
        En *= Ak * A * Bk;
        Ep *= Ak * Bk * B;
        Ak *= A;
        Bk *= B;
    }
    if (want_grad) {
        *Lu = -1.5 / u + S3 / (2 * u * u * S0);
        *Lw = Sw / S0;
    }
    return S0;
}

/* Large-time series (u >= 0.25). Sum S = sum_k k sin(k pi w) exp(-(k^2-1) q), q = pi^2 u / 2.
 * wc = 1 - w, passed exactly by the caller.
 * Term count: the tail bound of the numerics notes (1.3), [X^2 + X/(2q) + 1/(4q^2 X)] e^{-(X^2-1)q}
 * sin(pi w) after X - 1 terms, is largest at the switch q = pi^2/8; there it is 3.8e-12 sin(pi w) for
 * X = 5, while S >= 0.9 sin(pi w) for every w (the k >= 2 terms sum to at most 0.1 sin(pi w) in
 * magnitude). So four terms meet the relative tolerance 1e-10 everywhere (about 4e-12), and the sum is
 * evaluated branch-free; the gradient's k^3 and k^2 sums take a fifth term (tail < 1e-15).
 * tests/test_wiener.c re-checks these bounds. */
static double large_time(double u, double w, double wc, int want_grad, double *Lu, double *Lw)
{
    double q = 4.934802200544679309 * u; /* pi^2/2 * u */
    double dmin = w < 0.5 ? w : wc;
    double s1, c1;
    blw_sincospi(dmin, &s1, &c1);
    if (w > 0.5) c1 = -c1; /* cos(pi w) */
    double E = exp(-q), E2 = E * E, E3 = E2 * E, E4 = E2 * E2, E8 = E4 * E4;
    double e2 = E3, e3 = E8, e4 = E8 * E4 * E3; /* exp(-(k^2 - 1) q) */
    double tc = 2 * c1;
    double s2 = tc * s1, s3 = tc * s2 - s1, s4 = tc * s3 - s2; /* sin(k pi w): Chebyshev recurrence */
    double S = s1 + 2 * s2 * e2 + 3 * s3 * e3 + 4 * s4 * e4;
    if (want_grad) {
        double e5 = E8 * E8 * E8, s5 = tc * s4 - s3;
        double c2 = tc * c1 - 1, c3 = tc * c2 - c1, c4 = tc * c3 - c2, c5 = tc * c4 - c3;
        S += 5 * s5 * e5;
        double S3 = s1 + 8 * s2 * e2 + 27 * s3 * e3 + 64 * s4 * e4 + 125 * s5 * e5;
        double Sc = c1 + 4 * c2 * e2 + 9 * c3 * e3 + 16 * c4 * e4 + 25 * c5 * e5;
        *Lu = -4.934802200544679309 * S3 / S;
        *Lw = BLW_PI * Sc / S;
    }
    return S;
}

/* wc = 1 - w given exactly (for the upper boundary it is the user's start itself), so a start within
 * 1e-16 of a boundary keeps its relative precision. */
static double log_dens_lo_c(double t, double v, double a, double w, double wc, double sv, double *g)
{
    double a2 = a * a;
    double u = t / a2;
    double D = 1, base;
    if (sv == 0) {
        base = -v * a * w - 0.5 * v * v * t;
    } else {
        double s2 = sv * sv;
        D = 1 + s2 * t;
        base = -0.5 * log1p(s2 * t) + (s2 * a * a * w * w - 2 * v * a * w - v * v * t) / (2 * D);
    }
    double Lu = 0, Lw = 0, lf;
    int want = g != NULL;
    if (u < BLW_U_SWITCH) {
        double iu = a2 / t;
        double S = small_time(u, iu, w, wc, BL_WIENER_EPS, want, &Lu, &Lw);
        /* log phi - 2 log a = -log sqrt(2 pi) - w^2/(2u) + log(S a / t^1.5) */
        double y = S * a / (t * sqrt(t));
        double ly = (y > DBL_MIN && y < DBL_MAX) ? log(y) : log(S) + log(a) - 1.5 * log(t);
        lf = base - LOG_SQRT_2PI - 0.5 * w * w * iu + ly;
    } else {
        double S = large_time(u, w, wc, want, &Lu, &Lw);
        double y = BLW_PI * S / a2;
        double ly = (y > DBL_MIN && y < DBL_MAX) ? log(y) : log(BLW_PI * S) - 2 * log(a);
        lf = base - 4.934802200544679309 * u + ly;
    }
    if (g) {
        double s2 = sv * sv;
        double m = a * w + v * t;
        g[BLW_GV] = -m / D;
        g[BLW_GA] = (s2 * a * w * w - v * w) / D - 2 / a - (2 * t / (a * a * a)) * Lu;
        g[BLW_GW] = (s2 * a * a * w - v * a) / D + Lw;
        double N = s2 * a * a * w * w - 2 * v * a * w - v * v * t;
        g[BLW_GT] = -v * v / (2 * D) - s2 * N / (2 * D * D) - s2 / (2 * D) + Lu / (a * a);
        g[BLW_GSV] = sv * (m * m / (D * D) - t / D);
    }
    return lf;
}

double blw_log_dens_lo(double t, double v, double a, double w, double sv, double *g)
{
    return log_dens_lo_c(t, v, a, w, 1 - w, sv, g);
}

double blw_log_dens(double t, double v, double a, double w, double sv, int upper, double *g)
{
    if (!upper) return log_dens_lo_c(t, v, a, w, 1 - w, sv, g);
    double lf = log_dens_lo_c(t, -v, a, 1 - w, w, sv, g);
    if (g) {
        g[BLW_GV] = -g[BLW_GV];
        g[BLW_GW] = -g[BLW_GW];
    }
    return lf;
}

/* ---- tensor Gauss sums in the large-time range ------------------------------------------------- */

/* Sum over t nodes (tt[i], weights twt[i]) and start nodes (w + sz dz[j], weights wwt[j]) of the
 * density at one boundary by the large-time series: five terms at u = t/a^2 >= 0.25 (large_time()'s
 * bound, exact to 1e-15 relative), more below (down to u = BLW_TENSOR_U_MIN; count from a tail bound,
 * NAN when it needs more than BLW_GRID_NK terms or a sum is not 1e13 times its tail). The series factorises: exp(-(k^2-1)q) depends on t only and
 * sin(k pi w'), cos(k pi w') on the start only. The exponential prefactor
 * exp((sv^2 a^2 W^2 - 2 v a W - v^2 t) / (2D) - q), D = 1 + sv^2 t, splits into a row factor (t only),
 * a column factor (start only) and the cross factor exp(B'_j d_i), B'_j = B(W_j) - B(W_ref) with
 * B(W) = (sv^2 a^2 W^2 - 2 v a W)/2 and d_i = 1/D_i - 1/D_ref; the cross factor is 1 without drift_sd
 * and otherwise close to 1 (|B' d| is about sv^2 a sz st/2), so it is a Taylor polynomial whose degree
 * is chosen from the bound |x|^(m+1)/(m+1)! e^|x| <= 1e-17 (per-point exp only when |x| > 0.25).
 * A point then costs a few multiply-adds instead of a full log-density. The gradient is summed per row
 * as f-weighted moments in W (1, W, W^2, and the series' derivative sums) and combined with the row's
 * t-dependent coefficients once. Returns log of the sum; g (optional) receives the f-weighted means
 * of d log f / d(a, v, w, sv, sz), of d log f / dt and of (d log f / dt) tx[i] (tx may be NULL). */
/* The series sums at one point (inlined: with K = 5 the loop unrolls). */
static inline void series_sums(int K, const double *ks1, const double *ks3, const double *kc2, const double *ek,
                               int grad, double *ser, double *s3, double *sc)
{
    double a = 0, b = 0, c = 0;
    for (int k = 0; k < K; k++) a += ks1[k] * ek[k];
    if (grad)
        for (int k = 0; k < K; k++) {
            b += ks3[k] * ek[k];
            c += kc2[k] * ek[k];
        }
    *ser = a;
    *s3 = b;
    *sc = c;
}

double blw_grid_large(double v, double a, double w, double sv, double sz, int upper, int nt, const double *tt,
                      const double *twt, const double *tx, int nw, const double *dz, const double *wwt,
                      double g[BLW_GRID_NG])
{
    enum { NT = 64 + 2, NW = 40, NTAYLOR = 12, NK = BLW_GRID_NK };
    if (nt > NT || nw > NW) return NAN;
    const double HALF_PI2 = 4.934802200544679309; /* pi^2 / 2 */
    double vv = upper ? -v : v, sg = upper ? -1 : 1, a2 = a * a, s2 = sv * sv;
    double ek[NT][NK], row[NT], di[NT], iDi[NT];
    double Wj[NW], ks1[NW][NK], ks3[NW][NK], kc2[NW][NK], col[NW], Bp[NW];
    /* terms: five at u >= 1/4 (the bound in large_time()); below, the smallest K whose tail bound
     * sum_{k > K} k^p e^{-(k^2-1) q} <= X^p e^{-(X^2-1) q} / (1 - rho), X = K + 1,
     * rho = ((X+1)/X)^p e^{-(2X+1) q} (ratios of successive terms decrease), is below 1e-16 at the
     * earliest node (p = 3 with the gradient: the k^3 sums); checked against the computed sums below */
    double tmin = tt[0];
    for (int i = 1; i < nt; i++) tmin = fmin(tmin, tt[i]);
    double qmin = HALF_PI2 * tmin / a2, tail = 0;
    int K = 5, pw = g ? 3 : 1;
    if (tmin < BLW_U_SWITCH * a2) {
        for (K = 5;; K++) {
            double X = K + 1, rho = pow((X + 1) / X, pw) * exp(-(2 * X + 1) * qmin);
            tail = rho < 1 ? pow(X, pw) * exp(-(X * X - 1) * qmin) / (1 - rho) : INFINITY;
            if (tail <= 1e-16) break;
            if (K == NK) return NAN;
        }
    }
    /* reference: the exponent at the window centre and the user's start, so every factor stays O(e^(|v| a sz)) */
    double tref = tt[nt / 2], Wref = upper ? 1 - w : w;
    double iDref = 1 / (1 + s2 * tref), Bref = 0.5 * (s2 * a2 * Wref * Wref - 2 * vv * a * Wref);
    double Tref = -0.5 * vv * vv * tref * iDref - HALF_PI2 * tref / a2;
    double dmax = 0, bmax = 0;
    for (int i = 0; i < nt; i++) {
        double q = HALF_PI2 * tt[i] / a2, E = exp(-q), E2 = E * E, Ek = E * E2; /* E^(2k+1) */
        ek[i][0] = 1;
        for (int k = 1; k < K; k++) {
            ek[i][k] = ek[i][k - 1] * Ek; /* e^{-((k+1)^2 - 1) q} = e^{-(k^2-1) q} E^{2k+1} */
            Ek *= E2;
        }
        double iD = 1 / (1 + s2 * tt[i]);
        iDi[i] = iD;
        di[i] = iD - iDref;
        dmax = fmax(dmax, fabs(di[i]));
        /* t-part of the prefactor relative to the reference, with D^(-1/2) relative to the reference */
        double T = -0.5 * vv * vv * tt[i] * iD - q;
        if (i == nt / 2) row[i] = twt[i]; /* the reference node itself: exactly 1 */
        else row[i] = twt[i] * (s2 > 0 ? sqrt(iD / iDref) : 1) * exp(T - Tref + Bref * di[i]);
    }
    for (int j = 0; j < nw; j++) {
        double wp = w + sz * dz[j];
        double W = upper ? 1 - wp : wp, Wc = upper ? wp : 1 - wp;
        double s1, c1;
        blw_sincospi(W < 0.5 ? W : Wc, &s1, &c1);
        if (W > 0.5) c1 = -c1;
        double tc = 2 * c1, sk[NK], ck[NK];
        sk[0] = s1;
        ck[0] = c1;
        sk[1] = tc * s1;
        ck[1] = tc * c1 - 1;
        for (int k = 2; k < K; k++) {
            sk[k] = tc * sk[k - 1] - sk[k - 2];
            ck[k] = tc * ck[k - 1] - ck[k - 2];
        }
        for (int k = 0; k < K; k++) ks1[j][k] = (k + 1) * sk[k];
        if (g)
            for (int k = 0; k < K; k++) {
                double kk = k + 1;
                ks3[j][k] = kk * kk * kk * sk[k];
                kc2[j][k] = kk * kk * ck[k];
            }
        Wj[j] = W;
        Bp[j] = 0.5 * (W - Wref) * (s2 * a2 * (W + Wref) - 2 * vv * a);
        bmax = fmax(bmax, fabs(Bp[j]));
        col[j] = wwt[j] * exp(Bp[j] * iDref);
    }
    /* degree of the cross factor's Taylor polynomial (0: the factor is 1; -1: exp per point) */
    double X = bmax * dmax, inv[NTAYLOR + 1];
    int deg = 0;
    if (X > 0.25) deg = -1;
    else if (X > 0) {
        double term = 1;
        while (deg < NTAYLOR && (term *= X / (deg + 1)) * 1.3 > 1e-17) deg++;
        for (int r = 1; r <= deg; r++) inv[r] = 1.0 / r;
    }
    double S = 0, G[BLW_GRID_NG] = {0}, sermin = INFINITY;
    for (int i = 0; i < nt; i++) {
        double A0 = 0, A1 = 0, A2 = 0, AL = 0, AC = 0, Ad = 0, A1d = 0, ACd = 0;
        for (int j = 0; j < nw; j++) {
            double ser = 0, s3 = 0, sc = 0;
            if (K == 5) series_sums(5, ks1[j], ks3[j], kc2[j], ek[i], g != NULL, &ser, &s3, &sc);
            else series_sums(K, ks1[j], ks3[j], kc2[j], ek[i], g != NULL, &ser, &s3, &sc);
            if (ser < sermin) sermin = ser;
            double cross = 1, x = Bp[j] * di[i];
            if (deg < 0) cross = exp(x);
            else
                for (int r = deg; r >= 1; r--) cross = 1 + x * cross * inv[r];
            double pre = row[i] * col[j] * cross, e = pre * ser;
            A0 += e;
            if (g) {
                double W = Wj[j], eW = e * W, pc = pre * sc;
                A1 += eW;
                A2 += eW * W;
                AL += pre * s3;
                AC += pc;
                Ad += e * dz[j];
                A1d += eW * dz[j];
                ACd += pc * dz[j];
            }
        }
        S += A0;
        if (!g) continue;
        double t = tt[i], iD = iDi[i], vt = vv * t;
        double NA = s2 * a2 * A2 - 2 * vv * a * A1 - vv * vt * A0; /* sum of e N */
        double gt = -0.5 * (vv * vv + s2) * iD * A0 - 0.5 * s2 * iD * iD * NA - HALF_PI2 / a2 * AL;
        G[0] += (s2 * a * A2 - vv * A1) * iD - 2 / a * A0 + 2 * t / (a2 * a) * HALF_PI2 * AL;
        G[1] -= sg * iD * (a * A1 + vt * A0);
        G[2] += sg * ((s2 * a2 * A1 - vv * a * A0) * iD + BLW_PI * AC);
        G[3] += sv * (iD * iD * (a2 * A2 + 2 * a * vt * A1 + vt * vt * A0) - t * iD * A0);
        G[4] += sg * ((s2 * a2 * A1d - vv * a * Ad) * iD + BLW_PI * ACd);
        G[5] += gt;
        G[6] += gt * (tx ? tx[i] : 0);
    }
    if (!(S > 0)) return -INFINITY;
    /* below u = 1/4 the series may cancel (the density rises from 0): every point's sum must dwarf the tail */
    if (tail > 1e-13 * sermin) return NAN;
    if (g)
        for (int k = 0; k < BLW_GRID_NG; k++) g[k] = G[k] / S;
    /* undo the reference: the exponent at (tref, Wref) and D_ref^(-1/2) */
    return Bref * iDref + Tref + 0.5 * log(iDref) + log(BLW_PI * S / a2);
}

/* Weighted sum of the density at one boundary over a list of points (t[i], start w + sz dz[i],
 * weight wt[i]), in logs, one pass relative to the running maximum. Per point: small_time() or
 * large_time() and one exp, no log. The sum is merged into acc (log-sum state; see wiener_internal.h);
 * g sums (when acc->grad) are the weighted d log f / d(a, v, w, sv, sz, t) and (d log f/dt) tx[i]. */
void blw_point_sum(double v, double a, double w, double sv, double sz, int upper, int n, const double *t,
                   const double *dz, const double *wt, const double *tx, blw_acc *acc)
{
    double vv = upper ? -v : v, sg = upper ? -1 : 1, a2 = a * a, s2 = sv * sv;
    for (int i = 0; i < n; i++) {
        double ti = t[i], u = ti / a2, D = 1 + s2 * ti, iD = 1 / D;
        double wp = w + sz * dz[i];
        double W = upper ? 1 - wp : wp, Wc = upper ? wp : 1 - wp;
        double Lu = 0, Lw = 0, E, R;
        double N = s2 * a2 * W * W - 2 * vv * a * W - vv * vv * ti;
        if (u < BLW_U_SWITCH) {
            double S0 = small_time(u, a2 / ti, W, Wc, BL_WIENER_EPS, acc->grad, &Lu, &Lw);
            E = N * 0.5 * iD - 0.5 * W * W / u;
            R = wt[i] * a / (ti * sqrt(ti * D)) * 0.39894228040143267794 * S0;
        } else {
            double S = large_time(u, W, Wc, acc->grad, &Lu, &Lw);
            E = N * 0.5 * iD - 4.934802200544679309 * u;
            R = wt[i] * BLW_PI / (a2 * sqrt(D)) * S;
        }
        if (!(R > 0)) continue;
        if (E > acc->mx) {
            double r = acc->mx == -INFINITY ? 0 : exp(acc->mx - E);
            acc->S *= r;
            if (acc->grad)
                for (int k = 0; k < BLW_GRID_NG; k++) acc->G[k] *= r;
            acc->mx = E;
        }
        double e = R * exp(E - acc->mx);
        acc->S += e;
        if (acc->grad) {
            double m = a * W + vv * ti;
            double gw_ = sg * ((s2 * a2 * W - vv * a) * iD + Lw);
            double gt = -vv * vv * 0.5 * iD - s2 * N * 0.5 * iD * iD - s2 * 0.5 * iD + Lu / a2;
            acc->G[0] += e * ((s2 * a * W * W - vv * W) * iD - 2 / a - (2 * ti / (a2 * a)) * Lu);
            acc->G[1] += e * (-sg * m * iD);
            acc->G[2] += e * gw_;
            acc->G[3] += e * sv * (m * m * iD * iD - ti * iD);
            acc->G[4] += e * gw_ * dz[i];
            acc->G[5] += e * gt;
            if (tx) acc->G[6] += e * gt * tx[i];
        }
    }
}

/* ---- the start average in closed form, small time ------------------------------------------------- */

/* erfcx(z) = exp(z^2) erfc(z) for z >= 0: directly below 26 (erfc(26) = 5.7e-296 is still normal),
 * else the asymptotic series 1/(z sqrt(pi)) (1 - 1/(2z^2) + 3/(4z^4) - 15/(8z^6) + 105/(16z^8))
 * (Abramowitz & Stegun 7.1.23; the omitted term is below 1e-12 relative there). */
static double erfcx_pos(double z)
{
    if (z < 26) return exp(z * z) * erfc(z);
    double r = 1 / (z * z);
    return 0.56418958354775628695 / z * (1 + r * (-0.5 + r * (0.75 + r * (-1.875 + r * 6.5625))));
}

/* One image k of the small-time series integrated over W in [W1, W2]: with Q(W) = c2 W^2 + c1 W + c0 =
 * C - alpha (W - mu)^2 / 2, the integrals J_m = int W^m (W + 2k) e^{Q(W) - R} dW (m = 0, 1, 2) from
 * the Gaussian moments over y = W - mu in [y1, y2]; e1, e2 = e^{Q(W1,2) - R}. J[0] only unless grad. */
static void image_integrals(double alpha, double mu, double beta, double C, double R, double W1, double W2, double e1,
                            double e2, int grad, double J[3])
{
    double y1 = W1 - mu, y2 = W2 - mu, s = sqrt(0.5 * alpha), z1 = s * y1, z2 = s * y2;
    double c = 1.25331413731550025121 / sqrt(alpha); /* sqrt(pi / (2 alpha)) */
    double H;                                        /* e^{C-R} int e^{-alpha y^2/2} dy */
    if (y1 >= 0) H = c * (e1 * erfcx_pos(z1) - e2 * erfcx_pos(z2));
    else if (y2 <= 0) H = c * (e2 * erfcx_pos(-z2) - e1 * erfcx_pos(-z1));
    else H = c * exp(C - R) * (erf(z2) - erf(z1));
    double ia = 1 / alpha, K1 = (e1 - e2) * ia;
    J[0] = K1 + beta * H;
    if (!grad) return;
    double K2 = (y1 * e1 - y2 * e2) * ia + H * ia;
    double K3 = (y1 * y1 * e1 - y2 * y2 * e2) * ia + 2 * K1 * ia;
    J[1] = K2 + (mu + beta) * K1 + mu * beta * H;
    J[2] = K3 + (2 * mu + beta) * K2 + (mu * mu + 2 * mu * beta) * K1 + mu * mu * beta * H;
}

/* The density at decision time t (u = t/a^2 < 0.25) averaged over the start w' in [w - sz/2, w + sz/2],
 * in closed form (docs/methods.md, "start_range in small time"): with drift_sd the exponent of every
 * image of the small-time series is quadratic in the start, so each image integrates to Gaussian
 * moments (erf/erfc and exp at the ends). Images k = 0 and -1 always, k = 1, -2, 2 where their largest
 * ratio to the k = 0 term over the range can exceed 1e-13. Merged into acc like one point of weight wt
 * (gradient sums as in blw_point_sum; tx multiplies the t-derivative into G[6]). Returns 0 (nothing
 * merged) where the form is not used: a range end within 1e-3 of a boundary (the images cancel there). */
int blw_start_window_small(double t, double v, double a, double w, double sv, double sz, int upper, double wt,
                           double tx, blw_acc *acc)
{
    double vv = upper ? -v : v, sg = upper ? -1 : 1, Wc = upper ? 1 - w : w;
    double W1 = Wc - 0.5 * sz, W2 = Wc + 0.5 * sz;
    if (!(W1 > 1e-3) || !(W2 < 1 - 1e-3) || !(sz > 0) || !(t > 0)) return 0;
    double a2 = a * a, s2 = sv * sv, D = 1 + s2 * t, iu = a2 / t, u = t / a2;
    double alpha = iu / D, c2 = 0.5 * s2 * a2 / D - 0.5 * iu;
    /* image k relative to k = 0 at the same W: |W + 2k| / W exp(-2k(k + W)/u) <= 4001 e^{-x} (W >= 1e-3);
     * below 1e-13 when x > 38.3 */
    int ks[5] = {0, -1}, nk = 2;
    if (2 * (1 + W1) * iu < 38.3) ks[nk++] = 1;
    if ((8 - 4 * W2) * iu < 38.3) ks[nk++] = -2;
    if ((8 + 4 * W1) * iu < 38.3) ks[nk++] = 2;
    double c1k[5], c0k[5], Q1[5], Q2[5], Ck[5], mu[5], R = -INFINITY;
    for (int i = 0; i < nk; i++) {
        double k = ks[i];
        c1k[i] = -vv * a / D - 2 * k * iu;
        c0k[i] = -0.5 * vv * vv * t / D - 2 * k * k * iu;
        Q1[i] = (c2 * W1 + c1k[i]) * W1 + c0k[i];
        Q2[i] = (c2 * W2 + c1k[i]) * W2 + c0k[i];
        mu[i] = -vv * a * u - 2 * k * D;
        Ck[i] = (c2 * mu[i] + c1k[i]) * mu[i] + c0k[i];
        double top = fmax(Q1[i], Q2[i]);
        if (mu[i] > W1 && mu[i] < W2) top = Ck[i];
        if (top > R) R = top;
    }
    int grad = acc->grad;
    double T = 0, Ga = 0, Gv = 0, Gs = 0, Gt = 0, P1 = 0, P2 = 0;
    for (int i = 0; i < nk; i++) {
        double k = ks[i], J[3] = {0, 0, 0};
        double e1 = exp(Q1[i] - R), e2 = exp(Q2[i] - R);
        image_integrals(alpha, mu[i], mu[i] + 2 * k, Ck[i], R, W1, W2, e1, e2, grad, J);
        T += J[0];
        if (!grad) continue;
        P1 += (W1 + 2 * k) * e1;
        P2 += (W2 + 2 * k) * e2;
        /* d(c2, c1, c0) / d(a, vv, sv, t) */
        double iD = 1 / D, iD2 = iD * iD;
        double c2a = s2 * a * iD - a / t, c1a = -vv * iD - 4 * k * a / t, c0a = -4 * k * k * a / t;
        double c1v = -a * iD, c0v = -vv * t * iD;
        double c2s = sv * a2 * iD2, c1s = 2 * sv * t * vv * a * iD2, c0s = sv * t * t * vv * vv * iD2;
        double c2t = -0.5 * s2 * s2 * a2 * iD2 + 0.5 * iu / t, c1t = vv * a * s2 * iD2 + 2 * k * iu / t,
               c0t = -0.5 * vv * vv * iD2 + 2 * k * k * iu / t;
        Ga += c2a * J[2] + c1a * J[1] + c0a * J[0];
        Gv += c1v * J[1] + c0v * J[0];
        Gs += c2s * J[2] + c1s * J[1] + c0s * J[0];
        Gt += c2t * J[2] + c1t * J[1] + c0t * J[0];
    }
    if (!(T > 0) || !isfinite(T)) return 0;
    /* log of wt * (1/sz) * a / (sqrt(2 pi) t^1.5 sqrt(D)) * T e^R */
    double lv = log(wt * T * a / (sz * t * sqrt(t * D))) - 0.91893853320467274178 + R;
    if (lv > acc->mx) {
        double r = acc->mx == -INFINITY ? 0 : exp(acc->mx - lv);
        acc->S *= r;
        if (grad)
            for (int q = 0; q < BLW_GRID_NG; q++) acc->G[q] *= r;
        acc->mx = lv;
    }
    double e = exp(lv - acc->mx);
    acc->S += e;
    if (!grad) return 1;
    double iT = 1 / T;
    double gt = -1.5 / t - 0.5 * s2 / D + Gt * iT;
    acc->G[0] += e * (1 / a + Ga * iT);
    acc->G[1] += e * sg * Gv * iT;
    acc->G[2] += e * sg * (P2 - P1) * iT;
    acc->G[3] += e * (-sv * t / D + Gs * iT);
    acc->G[4] += e * (0.5 * (P1 + P2) * iT - 1 / sz);
    acc->G[5] += e * gt;
    acc->G[6] += e * gt * tx;
    return 1;
}

/* ---- boundary probabilities and moments --------------------------------------------------------- */

/* wc = 1 - w exactly (see log_dens_lo_c) */
static double log_p_lo_c(double v, double a, double w, double wc)
{
    double va = v * a;
    if (va == 0) return log(wc);
    if (va > 0) return -2 * va * w + log(-expm1(-2 * va * wc)) - log(-expm1(-2 * va));
    return log(-expm1(2 * va * wc)) - log(-expm1(2 * va));
}

double blw_log_p_lo(double v, double a, double w) { return log_p_lo_c(v, a, w, 1 - w); }

double blw_log_p(double v, double a, double w, int upper)
{
    return upper ? log_p_lo_c(-v, a, 1 - w, w) : log_p_lo_c(v, a, w, 1 - w);
}

/* h(x) = (x coth x - 1) / x^2, even, h(0) = 1/3. */
static double coth_h(double x)
{
    double x2 = x * x;
    if (fabs(x) < 0.1) return 1.0 / 3 + x2 * (-1.0 / 45 + x2 * (2.0 / 945 + x2 * (-1.0 / 4725 + x2 * (2.0 / 93555))));
    if (fabs(x) > 40) return (fabs(x) - 1) / x2;
    return (x / tanh(x) - 1) / x2;
}

/* E[T | lower] = [a coth(va) - z' coth(v z')] / v with z' = a - z the distance to the upper
 * boundary, written as a^2 h(va) - z'^2 h(v z') so v -> 0 needs no special case. */
static double mean_t_c(double v, double a, double wc)
{
    double zp = a * wc;
    return a * a * coth_h(v * a) - zp * zp * coth_h(v * zp);
}

double blw_mean_t_lo(double v, double a, double w) { return mean_t_c(v, a, 1 - w); }

/* E[T | upper](v, a, w) = E[T | lower](-v, a, 1 - w) and h is even: the distance to the far boundary
 * is the start itself, passed without rounding. */
double blw_mean_t(double v, double a, double w, int upper) { return upper ? mean_t_c(v, a, w) : mean_t_c(v, a, 1 - w); }

static double drift_log_integrand(double x, double v, double a, double w, double sv, int upper)
{
    return -0.5 * x * x + blw_log_p(v + sv * x, a, w, upper);
}

/* P(boundary) and E[T | boundary] averaged over the drift_sd normal and the start_range uniform.
 * Drift: composite Gauss-Legendre over x (nu = v + sv x, normal weight) on [-9, 9] joined with
 * [x* - 9, x* + 9], x* the maximum of -x^2/2 + log P(v + sv x) (for a rare boundary the integrand peaks
 * near x* = 2a(1-w)sv, far beyond 9 SD); panels no wider than the distance pi/(a sv) of P's poles from
 * the real axis; start: Gauss-Legendre, 24 nodes. Summed in logs relative to the peak, so probabilities
 * of 1e-300 keep their digits. Not a hot path (used for predictions), so it favours accuracy
 * (checked against GSL qagi to 1e-9 and against mpmath). */
static void moments_var(double a, double v, double w, double sv, double sz, int upper, double *prob, double *mean_t)
{
    const double *gx, *gw, *lx, *lw;
    static const double one = 1, zero = 0;
    int panels = 1, ng = 1, nl = 1;
    double half = 0, xlo = 0, href = blw_log_p(v, a, w, upper);
    gx = lx = &zero;
    gw = lw = &one;
    if (sv > 0) {
        /* the log-integrand is concave in x: golden-section search for its maximum on [-60, 60] */
        double l = -60, r = 60, g = 0.6180339887498949;
        for (int it = 0; it < 90; it++) {
            double m1 = r - g * (r - l), m2 = l + g * (r - l);
            if (drift_log_integrand(m1, v, a, w, sv, upper) < drift_log_integrand(m2, v, a, w, sv, upper)) l = m1;
            else r = m2;
        }
        double xs = 0.5 * (l + r);
        href = drift_log_integrand(xs, v, a, w, sv, upper);
        xlo = fmin(-9, xs - 9);
        double xhi = fmax(9, xs + 9);
        double width = fmin(1.5, BLW_PI / (a * sv));
        panels = (int)ceil((xhi - xlo) / width);
        if (panels > 800) panels = 800;
        half = 0.5 * (xhi - xlo) / panels;
        blw_gauss_legendre(ng = 16, &gx, &gw);
    }
    if (sz > 0) blw_gauss_legendre(nl = 24, &lx, &lw);
    double P = 0, M = 0;
    for (int pi = 0; pi < panels; pi++) {
        double centre = sv > 0 ? xlo + (2 * pi + 1) * half : 0;
        for (int i = 0; i < ng; i++) {
            double xi = centre + half * gx[i];
            /* normal weight in logs, relative to the peak href */
            double lwi = sv > 0 ? log(gw[i] * 2 * half * 0.39894228040143267794) - 0.5 * xi * xi : 0;
            double vi = v + sv * xi;
            for (int j = 0; j < nl; j++) {
                double wj = w + 0.5 * sz * lx[j];
                double pij = lw[j] * exp(lwi + blw_log_p(vi, a, wj, upper) - href);
                double mij = blw_mean_t(vi, a, wj, upper);
                P += pij;
                M += pij * mij;
            }
        }
    }
    if (prob) *prob = exp(href) * P;
    if (mean_t) *mean_t = M / P;
}

void blw_variability_moments(const bl_wiener_params *p, int upper, double *prob, double *mean_t)
{
    const double *x = p->value;
    moments_var(x[BL_THRESHOLD], x[BL_DRIFT], x[BL_START], x[BL_DRIFT_SD], x[BL_START_RANGE], upper, prob, mean_t);
}

double blw_p_var(double v, double a, double w, double sv, double sz, int upper)
{
    double P;
    if (sv == 0 && sz == 0) return exp(blw_log_p(v, a, w, upper));
    moments_var(a, v, w, sv, sz, upper, &P, NULL);
    return P;
}
