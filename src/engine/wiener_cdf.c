/* Wiener first-passage CDF, the density with across-trial variability and contaminants, quantiles.
 *
 * Sources: CDF series of Blurton, Kesselmeier & Gondan (2012, J. Math. Psych. 56:470-475) (small
 * time, here written with log Phi terms) and the term-by-term integral of the Navarro & Fuss (2009)
 * large-time series for the survival; nondecision_range by the exact CDF difference
 * [F(rt - t0 + st/2) - F(rt - t0 - st/2)] / st, with drift_sd by the normal expectation of
 * e^{b nu} Phi(c nu + d) in closed form (Owen 1980, Commun. Stat. Simul. Comput. 9:389-419, 10,010.8);
 * contaminants as a uniform mixture
 * (Ratcliff & Tuerlinckx 2002, Psychon. Bull. Rev. 9:438-481). See docs/methods.md.
 */
#include "engine/wiener_internal.h"

#include <float.h>
#include <math.h>

static const double LOG_SQRT_2PI = 0.91893853320467274178;
static const double CDF_EPS = 1e-13;

/* log of the standard normal CDF; asymptotic series where erfc would underflow. */
static double ln_Phi(double x)
{
    if (x > -35) return log(0.5 * erfc(-x * BLW_SQRT1_2));
    double r = 1 / (x * x);
    double s = 1 + r * (-1 + r * (3 + r * (-15 + r * (105 + r * (-945 + r * 10395)))));
    return -0.5 * x * x - log(-x) - LOG_SQRT_2PI + log(s);
}

/* Small-time series for the lower boundary:
 * F = sum_k (-1)^k [exp(-v(aw + r_k)) Phi((vt - r_k)/sqrt t) + exp(v(r_k - aw)) Phi(-(r_k + vt)/sqrt t)],
 * r_k = k a + a w (k even), (k + 1) a - a w (k odd). Terms decrease in k, so the alternating sum stops
 * at the first term below CDF_EPS times the sum. With dl != NULL also d log F / d(a, v, w). */
/* Image k of the small-time CDF series (Blurton et al. 2012): its distance r from the absorbing boundary
 * and the derivatives of r in a (ra) and in w (rw); even images come from the start, odd ones from its mirror
 * (wc = 1 - w, passed exactly). */
static inline void cdf_image(int k, double a, double w, double wc, double *r, double *ra, double *rw)
{
    if (k % 2 == 0) {
        *r = k * a + a * w;
        *ra = k + w;
        *rw = a;
    } else {
        *r = k * a + a * wc;
        *ra = k + wc;
        *rw = -a;
    }
}

/* The same series without logs of Phi: Phi from erfc directly, scaled by the exponential prefactors.
 * Returns 0 (caller falls back to the log form) when a Phi value could underflow. */
static int cdf_small_fast(double t, double v, double a, double w, double wc, double *lF)
{
    double st = sqrt(t), r0 = a * w;
    double m = fmax(-v * (a * w + r0), v * (r0 - a * w));
    double S = 0;
    for (int k = 0; k < 2000; k++) {
        double r = (k % 2 == 0) ? k * a + a * w : k * a + a * wc;
        double y1 = (v * t - r) / st, y2 = -(r + v * t) / st;
        if (y1 < -30 || y2 < -30) return 0;
        double e1 = -v * (a * w + r) - m, e2 = v * (r - a * w) - m;
        if (e1 > 700 || e2 > 700) return 0;
        double term = 0.5 * (erfc(-y1 * BLW_SQRT1_2) * exp(e1) + erfc(-y2 * BLW_SQRT1_2) * exp(e2));
        S += (k % 2) ? -term : term;
        if (k >= 1 && term <= CDF_EPS * fabs(S)) {
            if (!(S > 1e-250)) return 0;
            *lF = m + log(S);
            return 1;
        }
    }
    return 0;
}

static bl_status cdf_small(double t, double v, double a, double w, double wc, double *lF, double *dl)
{
    if (!dl && cdf_small_fast(t, v, a, w, wc, lF)) return BL_OK;
    double st = sqrt(t);
    double m = 0, S = 0, dS[3] = {0, 0, 0};
    for (int k = 0; k < 2000; k++) {
        double r, ra, rw;
        cdf_image(k, a, w, wc, &r, &ra, &rw);
        double y1 = (v * t - r) / st, y2 = -(r + v * t) / st;
        double l1 = ln_Phi(y1), l2 = ln_Phi(y2);
        double A = -v * (a * w + r) + l1, B = v * (r - a * w) + l2;
        if (k == 0) m = A > B ? A : B;
        double eA = exp(A - m), eB = exp(B - m);
        double sg = (k % 2) ? -1 : 1;
        double term = eA + eB;
        S += sg * term;
        int small = term <= CDF_EPS * fabs(S);
        if (dl) {
            /* d log Phi(y)/dy = phi(y)/Phi(y) */
            double h1 = exp(-0.5 * y1 * y1 - LOG_SQRT_2PI - l1), h2 = exp(-0.5 * y2 * y2 - LOG_SQRT_2PI - l2);
            double dA[3] = {-v * (w + ra) - h1 * ra / st, -(a * w + r) + h1 * st, -v * (a + rw) - h1 * rw / st};
            double dB[3] = {v * (ra - w) - h2 * ra / st, (r - a * w) - h2 * st, v * (rw - a) - h2 * rw / st};
            for (int i = 0; i < 3; i++) {
                double gt = eA * dA[i] + eB * dB[i];
                dS[i] += sg * gt;
                if (fabs(gt) > CDF_EPS * (fabs(dS[i]) + fabs(S))) small = 0;
            }
        }
        if (k >= 1 && small) {
            if (!(S > 0)) {
                *lF = -INFINITY;
                if (dl) dl[0] = dl[1] = dl[2] = 0;
                return S == 0 ? BL_OK : BL_ERR_NUMERIC;
            }
            *lF = m + log(S);
            if (dl)
                for (int i = 0; i < 3; i++) dl[i] = dS[i] / S;
            return BL_OK;
        }
    }
    return BL_ERR_NUMERIC;
}

/* Small-time CDF series averaged over drift_sd in closed form, lower boundary. With the drift normal,
 * nu ~ N(v, sv^2), every term of the series above is e^{b nu} Phi(c nu + d), and
 * E[e^{b nu} Phi(c nu + d)] = e^{b v + b^2 sv^2/2} Phi((c (v + b sv^2) + d) / sqrt(1 + c^2 sv^2))
 * (complete the square, then Owen 1980, Commun. Stat. Simul. Comput. 9:389-419, formula 10,010.8:
 * int Phi(p + q x) phi(x) dx = Phi(p / sqrt(1 + q^2))). With A = a w + r_k, B = r_k - a w,
 * D = 1 + sv^2 t, rho = sqrt(t D):
 *   F = sum_k (-1)^k [e^{-A v + A^2 sv^2/2} Phi(((v - A sv^2) t - r_k)/rho)
 *                    + e^{B v + B^2 sv^2/2} Phi(-((v + B sv^2) t + r_k)/rho)],
 * which is cdf_small at sv = 0. Each term's exponent is -r_k^2/(2t) + O(r_k) as k grows, so the series
 * converges like the density's images. Returns 0 (caller uses another method) when it cannot be summed
 * here (a sum that is not positive, more than 200 terms). dl (optional): d log F / d(a, v, w, sv). */
static int cdf_small_sv(double t, double v, double a, double w, double wc, double sv, double *lF, double dl[4])
{
    double s2 = sv * sv, D = 1 + s2 * t, rho = sqrt(t * D), irho = 1 / rho;
    double m = 0, S = 0, dS[4] = {0, 0, 0, 0};
    for (int k = 0; k < 200; k++) {
        double r, ra, rw;
        cdf_image(k, a, w, wc, &r, &ra, &rw);
        double A = a * w + r, B = r - a * w;
        double E1 = A * (0.5 * A * s2 - v), E2 = B * (0.5 * B * s2 + v);
        double x1 = ((v - A * s2) * t - r) * irho, x2 = -((v + B * s2) * t + r) * irho;
        /* reference exponent from the k = 0 term (log Phi only where Phi is below 1e-197) */
        if (k == 0) m = fmax(E1 + (x1 < -30 ? ln_Phi(x1) : 0), E2 + (x2 < -30 ? ln_Phi(x2) : 0));
        /* e^{E - m} Phi(x): erfc directly unless Phi could underflow or the exponent overflow */
        double t1 = (x1 > -30 && E1 - m < 700) ? exp(E1 - m) * 0.5 * erfc(-x1 * BLW_SQRT1_2) : exp(E1 - m + ln_Phi(x1));
        double t2 = (x2 > -30 && E2 - m < 700) ? exp(E2 - m) * 0.5 * erfc(-x2 * BLW_SQRT1_2) : exp(E2 - m + ln_Phi(x2));
        double sg = (k % 2) ? -1 : 1, term = t1 + t2;
        S += sg * term;
        int small = term <= CDF_EPS * fabs(S);
        if (dl) {
            /* e^{E - m} phi(x): the derivative of Phi(x) carried by the same exponent */
            double p1 = exp(E1 - m - 0.5 * x1 * x1 - LOG_SQRT_2PI), p2 = exp(E2 - m - 0.5 * x2 * x2 - LOG_SQRT_2PI);
            double Aa = w + ra, Aw = a + rw, Ba = ra - w, Bw = rw - a;
            double e1A = A * s2 - v, e2B = B * s2 + v, st2 = s2 * t;
            double d[4];
            d[0] = t1 * e1A * Aa + p1 * (-st2 * Aa - ra) * irho + t2 * e2B * Ba + p2 * (-st2 * Ba - ra) * irho;
            d[1] = -t1 * A + p1 * t * irho + t2 * B - p2 * t * irho;
            d[2] = t1 * e1A * Aw + p1 * (-st2 * Aw - rw) * irho + t2 * e2B * Bw + p2 * (-st2 * Bw - rw) * irho;
            double xs = sv * t * t * irho * irho; /* d rho / d sv divided by rho */
            d[3] = t1 * A * A * sv + p1 * (-2 * A * sv * t * irho - x1 * xs) + t2 * B * B * sv +
                   p2 * (-2 * B * sv * t * irho - x2 * xs);
            for (int i = 0; i < 4; i++) {
                dS[i] += sg * d[i];
                if (fabs(d[i]) > CDF_EPS * (fabs(dS[i]) + fabs(S) * (1 + fabs(A) + fabs(B)))) small = 0;
            }
        }
        if (k >= 1 && small) {
            if (!(S > 0) || !isfinite(S)) return 0;
            *lF = m + log(S);
            if (dl)
                for (int i = 0; i < 4; i++) dl[i] = dS[i] / S;
            return 1;
        }
    }
    return 0;
}

/* Large-time series for the lower-boundary survival P(T > t, lower)
 * = 2 pi exp(-vaw - v^2 t/2 - q) g(v),  g(nu) = sum_k k sin(k pi w) e^{-(k^2-1) q} / (nu^2 a^2 + k^2 pi^2),
 * q = pi^2 t/(2a^2) (the Navarro-Fuss large-time density integrated term by term).
 * Tail after K terms <= (sin(pi w)/pi^2) e^{-(X^2-1)q} (1 + 1/(2qX)), X = K + 1, for every nu.
 * With drift_sd the normal drift density times exp(-nu a w - nu^2 t/2) is C N(nu; m', s'^2) with
 * D = 1 + sv^2 t, m' = (v - sv^2 a w)/D, s' = sv/sqrt(D) and log C the density's drift_sd exponent, so
 * S = 2 pi C e^{-q} E[g(m' + s' x)], x ~ N(0,1), by Gauss-Hermite: g has poles only at nu = +-i k pi/a,
 * so the node count follows s' a. With dl != NULL: d log S / d(a, v, w, sv). */
/* surv_large without drift_sd or derivatives: one pass, no tables. The survival is
 * 2 pi exp(*pf) * (*sum) with *pf = -v a w - v^2 t/2 - q. */
static bl_status surv_plain_parts(double t, double v, double a, double w, double wc, double *pf, double *sum)
{
    double q = 4.934802200544679309 * t / (a * a);
    double dmin = w < 0.5 ? w : wc;
    double s1, c1;
    blw_sincospi(dmin, &s1, &c1);
    if (w > 0.5) c1 = -c1;
    double va2 = v * v * a * a, pi2 = BLW_PI * BLW_PI;
    double E = exp(-q), E2 = E * E, r = E2 * E;
    double ek = 1, sk = s1, skm = 0, tc = 2 * c1;
    double S = s1 / (va2 + pi2);
    double iq2 = 0.5 / q;
    for (int k = 1; k < 10000; k++) {
        double X = k + 1;
        double eX = ek * r;
        r *= E2;
        /* tail <= (sin(pi w)/pi^2) e_X (1 + 1/(2qX)); multiplied through by X */
        if ((s1 / pi2) * eX * (X + iq2) <= CDF_EPS * S * X || eX == 0) {
            if (!(S > 0)) return BL_ERR_NUMERIC;
            *pf = -v * a * w - 0.5 * v * v * t - q;
            *sum = S;
            return BL_OK;
        }
        double sX = tc * sk - skm;
        S += X * sX * eX / (va2 + X * X * pi2);
        skm = sk;
        sk = sX;
        ek = eX;
    }
    return BL_ERR_NUMERIC;
}

static bl_status surv_plain(double t, double v, double a, double w, double wc, double *lS)
{
    double pf, sum;
    bl_status s = surv_plain_parts(t, v, a, w, wc, &pf, &sum);
    if (!s) *lS = log(2 * BLW_PI * sum) + pf;
    return s;
}

static bl_status surv_large(double t, double v, double a, double w, double wc, double sv, double *lS, double *dl)
{
    if (sv == 0 && !dl) return surv_plain(t, v, a, w, wc, lS);
    double q = 4.934802200544679309 * t / (a * a);
    double dmin = w < 0.5 ? w : wc;
    double s1, c1;
    blw_sincospi(dmin, &s1, &c1);
    if (w > 0.5) c1 = -c1;
    double pi2 = BLW_PI * BLW_PI, a2 = a * a;
    double E = exp(-q), E2 = E * E;
    /* terms k = 1..K (nu-independent parts), K from the tail bound relative to the smallest g */
    enum { KMAX = 400 };
    double ke[KMAX + 1], kc[KMAX + 1];
    double sv2 = sv * sv, D = 1 + sv2 * t;
    double mprime = (v - sv2 * a * w) / D, sprime = sv / sqrt(D);
    const double *gx, *gw;
    static const double zero = 0, one = 1;
    int n = 1;
    gx = &zero;
    gw = &one;
    if (sv > 0) {
        double sa = sprime * a;
        n = blw_gauss_hermite(sa <= 0.5 ? 12 : sa <= 1 ? 20 : sa <= 2 ? 32 : sa <= 3 ? 48 : 64, &gx, &gw);
    }
    double xmax = 0;
    for (int i = 0; i < n; i++) xmax = fmax(xmax, fabs(gx[i]));
    double numax = fabs(mprime) + sprime * xmax;
    /* g(nu) >= s1 / (nu^2 a^2 + pi^2) * (1 - small): use it to bound relative tails */
    double gmin = s1 / (numax * numax * a2 + pi2);
    int K = 1;
    {
        double ek = 1, sk = s1, skm = 0, ck = c1, ckm = 1, r = E2 * E;
        ke[1] = s1; /* k s_k e_k */
        kc[1] = c1; /* k^2 c_k e_k / k = k c_k e_k */
        for (int k = 1; k < KMAX; k++) {
            double X = k + 1, eX = ek * r;
            r *= E2;
            double bound = (s1 / pi2) * eX * (1 + 0.5 / (q * X));
            if (dl) bound *= X * X * (1 + 2 * q / a + BLW_PI + numax * numax * a2);
            if (bound <= CDF_EPS * 0.5 * gmin * (1 - 0.5 * CDF_EPS) || eX == 0) break;
            double sX = 2 * c1 * sk - skm, cX = 2 * c1 * ck - ckm;
            ke[k + 1] = X * sX * eX;
            kc[k + 1] = X * cX * eX;
            K = k + 1;
            skm = sk;
            sk = sX;
            ckm = ck;
            ck = cX;
            ek = eX;
        }
        if (K >= KMAX) return BL_ERR_NUMERIC;
    }
    double G = 0, Gn = 0, Gx = 0, Ga = 0, Gw = 0;
    for (int i = 0; i < n; i++) {
        double nu = mprime + sprime * gx[i], nu2a2 = nu * nu * a2;
        double g = 0, gn = 0, ga = 0, gwv = 0;
        for (int k = 1; k <= K; k++) {
            double den = nu2a2 + k * k * pi2, term = ke[k] / den;
            g += term;
            if (dl) {
                gn += -term * 2 * nu * a2 / den;
                ga += term * ((double)(k * k - 1) * 2 * q / a - 2 * nu * nu * a / den);
                gwv += k * BLW_PI * kc[k] / den;
            }
        }
        G += gw[i] * g;
        if (dl) {
            Gn += gw[i] * gn;
            Gx += gw[i] * gn * gx[i];
            Ga += gw[i] * ga;
            Gw += gw[i] * gwv;
        }
    }
    if (!(G > 0)) return BL_ERR_NUMERIC;
    double logC = sv == 0 ? -v * a * w - 0.5 * v * v * t
                          : -0.5 * log1p(sv2 * t) + (sv2 * a2 * w * w - 2 * v * a * w - v * v * t) / (2 * D);
    *lS = log(2 * BLW_PI * G) + logC - q;
    if (dl) {
        double m = a * w + v * t;
        /* d log C (the density's drift_sd exponent, numerics notes 4) */
        double Ca = (sv2 * a * w * w - v * w) / D, Cv = -m / D, Cw = (sv2 * a2 * w - v * a) / D,
               Csv = sv * (m * m / (D * D) - t / D);
        /* d m', d s' */
        double ma = -sv2 * w / D, mv = 1 / D, mw = -sv2 * a / D;
        double msv = -2 * sv * a * w / D - (v - sv2 * a * w) * 2 * sv * t / (D * D);
        double ssv = 1 / (D * sqrt(D));
        dl[0] = Ca + 2 * q / a + (Gn * ma + Ga) / G;
        dl[1] = Cv + Gn * mv / G;
        dl[2] = Cw + (Gn * mw + Gw) / G;
        dl[3] = Csv + (Gn * msv + Gx * ssv) / G;
    }
    return BL_OK;
}

/* wc = 1 - w exactly (the user's start for the upper boundary) */
/* lP = log P_lo(v, a, w) when the caller has it, else NAN */
static bl_status cdf_lo_c(double t, double v, double a, double w, double wc, double lP, double *log_cdf,
                          double *log_surv)
{
    if (isnan(lP)) lP = blw_log_p(-v, a, wc, 1); /* = log P_lo(v, a, w) with the complement kept exact */
    if (!(t > 0)) {
        *log_cdf = -INFINITY;
        if (log_surv) *log_surv = lP;
        return BL_OK;
    }
    double u = t / (a * a);
    bl_status s;
    /* With the start within 1e-3 of the far boundary the small-time series' first two images cancel
     * to ~wc; from u = 0.05 on the survival series is used instead (its complement F = P - S is then
     * well conditioned). */
    if (u < (wc < 1e-3 ? 0.05 : BLW_U_SWITCH)) {
        if ((s = cdf_small(t, v, a, w, wc, log_cdf, NULL))) return s;
        if (*log_cdf > lP) *log_cdf = lP;
        if (log_surv) {
            if (u >= 0.05) {
                if ((s = surv_large(t, v, a, w, wc, 0, log_surv, NULL))) return s;
            } else {
                *log_surv = blw_logsubexp(lP, *log_cdf);
            }
        }
    } else {
        double lS;
        if ((s = surv_large(t, v, a, w, wc, 0, &lS, NULL))) return s;
        if (lS > lP) lS = lP;
        *log_cdf = blw_logsubexp(lP, lS);
        if (log_surv) *log_surv = lS;
    }
    return BL_OK;
}

bl_status blw_log_cdf_lo(double t, double v, double a, double w, double *log_cdf, double *log_surv)
{
    return cdf_lo_c(t, v, a, w, 1 - w, NAN, log_cdf, log_surv);
}

bl_status blw_log_cdf(double t, double v, double a, double w, int upper, double *log_cdf, double *log_surv)
{
    return upper ? cdf_lo_c(t, -v, a, 1 - w, w, NAN, log_cdf, log_surv)
                 : cdf_lo_c(t, v, a, w, 1 - w, NAN, log_cdf, log_surv);
}

bl_status blw_log_cdf_grad(double t, double v, double a, double w, int upper, double *log_cdf, double dl[3])
{
    if (!(t > 0)) {
        *log_cdf = -INFINITY;
        dl[0] = dl[1] = dl[2] = 0;
        return BL_OK;
    }
    if (!upper) return cdf_small(t, v, a, w, 1 - w, log_cdf, dl);
    bl_status s = cdf_small(t, -v, a, 1 - w, w, log_cdf, dl);
    dl[1] = -dl[1];
    dl[2] = -dl[2];
    return s;
}

/* Survival P(T > t, boundary) by the large-time series (drift_sd included exactly up to the
 * Gauss-Hermite rule), with d log S / d(a, v, w, sv). */
bl_status blw_surv_direct(double t, double v, double a, double w, double sv, int upper, double *lS, double dl[4])
{
    if (!upper) return surv_large(t, v, a, w, 1 - w, sv, lS, dl);
    bl_status s = surv_large(t, -v, a, 1 - w, w, sv, lS, dl);
    if (dl) {
        dl[1] = -dl[1];
        dl[2] = -dl[2];
    }
    return s;
}

/* ---- density with variability ------------------------------------------------------------------- */

/* ---- integral of the density over a window of decision times ------------------------------------ */

/* Running sum of exp(term) and of exp(term) * g[], kept relative to its largest term (log space). */
typedef struct {
    double mx, S, G[BLW_NG];
    int grad;
} wsum;

/* Adds a block (its own maximum mx, sum S relative to it, gradient sums G) to the running sum. */
static void wsum_merge(wsum *acc, double mx, double S, const double *G)
{
    if (mx == -INFINITY || S == 0) return;
    double ra = 1, rb = 1;
    if (mx > acc->mx) {
        ra = acc->mx == -INFINITY ? 0 : exp(acc->mx - mx);
        acc->mx = mx;
    } else {
        rb = exp(mx - acc->mx);
    }
    acc->S = acc->S * ra + S * rb;
    if (acc->grad)
        for (int j = 0; j < BLW_NG; j++) acc->G[j] = acc->G[j] * ra + G[j] * rb;
}

/* Adds the terms exp(lt[i]) * wt[i] (with gradients g[i]) as one block; returns the block's log sum. */
static double wsum_block(wsum *acc, int n, const double *lt, const double *wt, double (*g)[BLW_NG])
{
    double mx = -INFINITY, S = 0, G[BLW_NG] = {0};
    for (int i = 0; i < n; i++)
        if (lt[i] > mx) mx = lt[i];
    if (mx == -INFINITY) return -INFINITY;
    for (int i = 0; i < n; i++) {
        double e = wt[i] * exp(lt[i] - mx);
        S += e;
        if (acc->grad)
            for (int j = 0; j < BLW_NG; j++) G[j] += e * g[i][j];
    }
    wsum_merge(acc, mx, S, G);
    return mx + log(S);
}

/* Cheap proxy for d log f / dt at the boundary (lower-boundary form with vv, z = distance of the start
 * to the boundary): the drift_sd exponent's t-derivative plus, in small time, the leading image's
 * z^2/(2t^2) - 3/(2t), else the large-time decay -pi^2/(2a^2). Sets the Gauss-Legendre node count. */
static double slope_proxy(double t, double vv, double a, double z, double sv)
{
    double s2 = sv * sv, D = 1 + s2 * t;
    double drift = -(s2 + vv * vv) / (2 * D) - s2 * (s2 * z * z - 2 * vv * z - vv * vv * t) / (2 * D * D);
    double u = t / (a * a);
    return drift + (u < BLW_U_SWITCH ? z * z / (2 * t * t) - 1.5 / t : -4.934802200544679309 / (a * a));
}

typedef struct {
    double v, a, w, sv, vv, z;
    int upper;
} wparams;

/* Gauss-Legendre over one panel [bot, top] (top / bot <= 2 unless bot = 0 is excluded by the caller).
 * Node count n = ceil(2.5 + 2.5 sqrt(E) + 0.1 E + 9 h/c), E = h max |slope proxy| at the ends, h the
 * half-width, c the centre (fitted to the minimum n for 1e-9 relative error over 86,000 windows,
 * docs/methods.md); panels needing more than 40 nodes are halved. Returns the log of the panel sum. */
static double window_panel(const wparams *P, double bot, double top, wsum *acc, int depth)
{
    double h = 0.5 * (top - bot), c = 0.5 * (top + bot);
    double E = h *
               fmax(fabs(slope_proxy(bot, P->vv, P->a, P->z, P->sv)), fabs(slope_proxy(top, P->vv, P->a, P->z, P->sv)));
    double nf = 2.5 + 2.5 * sqrt(E) + 0.1 * E + 9 * h / c;
    if (nf > 40 && depth < 12) {
        double l1 = window_panel(P, bot, c, acc, depth + 1), l2 = window_panel(P, c, top, acc, depth + 1);
        return blw_logaddexp(l1, l2);
    }
    int n = nf >= BLW_GL_MAX ? BLW_GL_MAX : (int)ceil(nf);
    const double *gx, *gw;
    blw_gauss_legendre(n, &gx, &gw);
    double lf[BLW_GL_MAX], wt[BLW_GL_MAX], g[BLW_GL_MAX][BLW_NG];
    for (int i = 0; i < n; i++) {
        lf[i] = blw_log_dens(c + h * gx[i], P->v, P->a, P->w, P->sv, P->upper, acc->grad ? g[i] : NULL);
        wt[i] = 2 * h * gw[i];
    }
    return wsum_block(acc, n, lf, wt, g);
}

/* log of the integral of f(t | v, a, w, sv) at one boundary over t in [max(lo, 0), hi], hi > 0, and
 * (G != NULL) the f-weighted average of d log f / d(a, v, w, t, sv) over the window.
 * Panels from hi downwards with ratio 2 (each by window_panel). When the window reaches t = 0 the
 * part below m = min(hi, z^2/20) (z = distance of the start to the boundary) goes by Gauss-Laguerre
 * in x = 1/t: f dt = e^{-z^2 x/2} x^{-1/2} (smooth) dx there, so with x = 1/m + 2y/z^2 the weight
 * e^{-y} carries the onset and the rest is smooth (its singularity lies >= 10 units away).
 * The descent stops early once the density is rising at the panel's top and the panel adds less than
 * e^-40 of the sum (the rest is then smaller still). */
static double window_integral(double lo, double hi, double v, double a, double w, double sv, int upper,
                              double G[BLW_NG])
{
    wparams P = {v, a, w, sv, upper ? -v : v, upper ? a * (1 - w) : a * w, upper};
    wsum acc = {-INFINITY, 0, {0}, G != NULL};
    double m = fmin(hi, 0.05 * P.z * P.z);
    double floor_ = lo > 0 ? lo : m;
    double top = hi;
    int onset = lo <= 0;
    for (int k = 0; top > floor_ && k < 200; k++) {
        double bot = fmax(floor_, 0.5 * top);
        double lp = window_panel(&P, bot, top, &acc, 0);
        if (bot > floor_ && lp < acc.mx + log(acc.S) - 40 && slope_proxy(top, P.vv, a, P.z, sv) > 0) {
            onset = 0;
            break;
        }
        top = bot;
    }
    if (onset && m > 0) {
        const double *y, *lw;
        blw_gauss_laguerre(0, &y, &lw);
        double beta = 0.5 * P.z * P.z, im = 1 / m, lb = log(beta);
        double lt[BLW_GLAG_N], one[BLW_GLAG_N], g[BLW_GLAG_N][BLW_NG];
        for (int j = 0; j < BLW_GLAG_N; j++) {
            double x = im + y[j] / beta;
            lt[j] = blw_log_dens(1 / x, v, a, w, sv, upper, G ? g[j] : NULL) + lw[j] + y[j] - 2 * log(x) - lb;
            one[j] = 1;
        }
        wsum_block(&acc, BLW_GLAG_N, lt, one, g);
    }
    if (acc.S == 0) {
        if (G)
            for (int j = 0; j < BLW_NG; j++) G[j] = 0;
        return -INFINITY;
    }
    if (G)
        for (int j = 0; j < BLW_NG; j++) G[j] = acc.G[j] / acc.S;
    return acc.mx + log(acc.S);
}

/* One start value: log density (no contaminants), nondecision_range as the average of the density
 * over the window of decision times [rt - t0 - st/2, rt - t0 + st/2] (window_integral).
 * g (optional, BL_NPARAM entries) receives d log f for threshold, drift, nondecision, start,
 * drift_sd and nondecision_range. */
static bl_status dens_one_start(const bl_wiener_params *p, double rt, double w, int upper, double *lf, double *g)
{
    const double *x = p->value;
    double a = x[BL_THRESHOLD], v = x[BL_DRIFT], t0 = x[BL_NONDECISION], sv = x[BL_DRIFT_SD];
    double st = x[BL_NONDECISION_RANGE];
    if (g)
        for (int i = 0; i < BL_NPARAM; i++) g[i] = 0;
    double g5[BLW_NG];
    if (st == 0) {
        double t = rt - t0;
        if (!(t > 0)) {
            *lf = -INFINITY;
            return BL_OK;
        }
        *lf = blw_log_dens(t, v, a, w, sv, upper, g ? g5 : NULL);
        if (g) {
            g[BL_THRESHOLD] = g5[BLW_GA];
            g[BL_DRIFT] = g5[BLW_GV];
            g[BL_START] = g5[BLW_GW];
            g[BL_NONDECISION] = -g5[BLW_GT];
            g[BL_DRIFT_SD] = g5[BLW_GSV];
        }
        return BL_OK;
    }
    double hi = rt - t0 + 0.5 * st, lo = rt - t0 - 0.5 * st;
    if (!(hi > 0)) {
        *lf = -INFINITY;
        return BL_OK;
    }
    if (sv == 0 && lo > 0) {
        /* without drift_sd the window integral is the CDF difference F(hi) - F(lo) (two series instead
         * of a Gauss rule); taken only when it keeps its digits: F(hi) < 1e3 (F(hi) - F(lo)) */
        double lFh, lFl, dh[3], dl[3];
        bl_status s = g ? blw_log_cdf_grad(hi, v, a, w, upper, &lFh, dh) : blw_log_cdf(hi, v, a, w, upper, &lFh, NULL);
        if (!s) s = g ? blw_log_cdf_grad(lo, v, a, w, upper, &lFl, dl) : blw_log_cdf(lo, v, a, w, upper, &lFl, NULL);
        double ld = s ? -INFINITY : blw_logsubexp(lFh, lFl);
        if (ld > -INFINITY && lFh - ld < 6.9) {
            *lf = ld - log(hi - lo);
            if (!g) return BL_OK;
            double rh = exp(lFh - ld), rl = exp(lFl - ld);
            g[BL_THRESHOLD] = rh * dh[0] - rl * dl[0];
            g[BL_DRIFT] = rh * dh[1] - rl * dl[1];
            g[BL_START] = rh * dh[2] - rl * dl[2];
            double fh = exp(blw_log_dens(hi, v, a, w, 0, upper, NULL) - ld);
            double fl = exp(blw_log_dens(lo, v, a, w, 0, upper, NULL) - ld);
            g[BL_NONDECISION] = fl - fh;
            g[BL_NONDECISION_RANGE] = 0.5 * (fh + fl) - 1 / st;
            return BL_OK;
        }
    }
    double lI = window_integral(lo, hi, v, a, w, sv, upper, g ? g5 : NULL);
    /* the average over the window as represented (for st ~ 1e-9 s, hi - lo differs from st in the 8th digit) */
    *lf = lI - log(lo > 0 ? hi - lo : st);
    if (!g || lI == -INFINITY) return BL_OK;
    g[BL_THRESHOLD] = g5[BLW_GA];
    g[BL_DRIFT] = g5[BLW_GV];
    g[BL_START] = g5[BLW_GW];
    g[BL_DRIFT_SD] = g5[BLW_GSV];
    /* d/d(ends) of the integral: f at the ends (Leibniz rule); the window moves with -t0 and widens with st */
    double fh = exp(blw_log_dens(hi, v, a, w, sv, upper, NULL) - lI);
    double fl = lo > 0 ? exp(blw_log_dens(lo, v, a, w, sv, upper, NULL) - lI) : 0;
    g[BL_NONDECISION] = fl - fh;
    g[BL_NONDECISION_RANGE] = 0.5 * (fh + fl) - 1 / st;
    return BL_OK;
}

/* start_range: composite Gauss-Legendre over w' in [w - sz/2, w + sz/2] (panels of equal width, weights
 * summing to 1). Node count from blw_gl_nodes_start_range at the earliest decision time of the window
 * (the integrand's sharpest feature) and from the exponential factor exp(-v a w' + sv^2 a^2 w'^2/(2D))
 * across the range; panels are added until a panel needs at most 40 nodes. */
static bl_status dens_start_range(const bl_wiener_params *p, double rt, int upper, double *lfd, double *gd)
{
    const double *x = p->value;
    double a = x[BL_THRESHOLD], t0 = x[BL_NONDECISION], w = x[BL_START], sz = x[BL_START_RANGE];
    double v = x[BL_DRIFT], sv = x[BL_DRIFT_SD];
    double stw = x[BL_NONDECISION_RANGE], lo = rt - t0 - 0.5 * stw, hi = rt - t0 + 0.5 * stw;
    double tmin = stw > 0 ? (lo > 0 ? fmax(lo, fmin(stw, 0.5 * (rt - t0))) : hi) : rt - t0;
    if (!(tmin > 0)) tmin = 1e-3 * a * a;
    double D = 1 + sv * sv * tmin;
    double slope = fabs(v * a) + sv * sv * a * a * (fmax(w, 1 - w) + 0.5 * sz) / D; /* |d exponent / dw'| */
    int P = 1, n;
    while ((n = blw_gl_nodes_start_range(sz / P, tmin / (a * a), 0.5 * sz / P * slope)) > 40 && P < 64) P++;
    const double *gx, *gw;
    blw_gauss_legendre(n, &gx, &gw);
    double mx = -INFINITY, S = 0, G[BL_NPARAM] = {0};
    for (int j = 0; j < P; j++) {
        double lfi[BLW_GL_MAX], gi[BLW_GL_MAX][BL_NPARAM], off = (j + 0.5) / P - 0.5;
        double pmx = -INFINITY;
        for (int i = 0; i < n; i++) {
            double dz = off + 0.5 * gx[i] / P; /* w' = w + sz dz */
            bl_status s = dens_one_start(p, rt, w + sz * dz, upper, &lfi[i], gd ? gi[i] : NULL);
            if (s) return s;
            if (gd) gi[i][BL_START_RANGE] = gi[i][BL_START] * dz;
            if (lfi[i] > pmx) pmx = lfi[i];
        }
        if (pmx == -INFINITY) continue;
        if (pmx > mx) {
            double r = mx == -INFINITY ? 0 : exp(mx - pmx);
            S *= r;
            for (int k = 0; k < BL_NPARAM; k++) G[k] *= r;
            mx = pmx;
        }
        for (int i = 0; i < n; i++) {
            double e = gw[i] / P * exp(lfi[i] - mx);
            S += e;
            if (gd)
                for (int k = 0; k < BL_NPARAM; k++) G[k] += e * gi[i][k];
        }
    }
    if (mx == -INFINITY) {
        *lfd = -INFINITY;
        if (gd)
            for (int k = 0; k < BL_NPARAM; k++) gd[k] = 0;
        return BL_OK;
    }
    *lfd = mx + log(S);
    if (gd)
        for (int k = 0; k < BL_NPARAM; k++) gd[k] = G[k] / S;
    return BL_OK;
}

static void acc_merge(blw_acc *to, const blw_acc *from)
{
    if (from->mx == -INFINITY || from->S == 0) return;
    double ra = 1, rb = 1;
    if (from->mx > to->mx) {
        ra = to->mx == -INFINITY ? 0 : exp(to->mx - from->mx);
        to->mx = from->mx;
    } else {
        rb = exp(from->mx - to->mx);
    }
    to->S = to->S * ra + from->S * rb;
    if (to->grad)
        for (int k = 0; k < BLW_GRID_NG; k++) to->G[k] = to->G[k] * ra + from->G[k] * rb;
}

static double acc_log(const blw_acc *acc) { return acc->S > 0 ? acc->mx + log(acc->S) : -INFINITY; }

typedef struct {
    double a, v, w, sv, sz, slope_z; /* slope_z: |d exponent / dw'| for the start-range rule */
    double zmin, vv;
    int upper;
} gctx;

/* start_range node count at decision time t (rule of blw_gl_nodes_start_range); 1 without start_range */
static int nodes_z(const gctx *C, double t)
{
    if (C->sz == 0) return 1;
    return blw_gl_nodes_start_range(C->sz, t / (C->a * C->a), 0.5 * C->sz * C->slope_z);
}

/* Start node counts from which the closed form (blw_start_window_small: about six calls to exp or erfc per
 * image) replaces the start nodes in small time, with the gradient and for the value alone (a node costs
 * about three calls to exp with the gradient's arithmetic, less without it). */
#define BLW_CLOSED_FORM_NZ 6
#define BLW_CLOSED_FORM_NZ_VALUE 10

/* Adds sum_i sum_j wt_i gw_j f(t_i, w + sz dz_j) for one row of times sharing a start rule of nz nodes. */
static void add_rows(const gctx *C, int nt, const double *t, const double *wt, const double *tx, int nz, blw_acc *acc)
{
    static const double one = 1, zero = 0;
    const double *zx = &zero, *zw = &one;
    if (nz > 1) blw_gauss_legendre(nz, &zx, &zw);
    double tt[BLW_GL_MAX], dz[BLW_GL_MAX], ww[BLW_GL_MAX], xx[BLW_GL_MAX];
    for (int i = 0; i < nt; i++) {
        /* small time: the start average in closed form where it is cheaper than nz start nodes */
        if (nz >= (acc->grad ? BLW_CLOSED_FORM_NZ : BLW_CLOSED_FORM_NZ_VALUE) && t[i] < BLW_U_SWITCH * C->a * C->a &&
            blw_start_window_small(t[i], C->v, C->a, C->w, C->sv, C->sz, C->upper, wt[i], tx ? tx[i] : 0, acc))
            continue;
        for (int j = 0; j < nz; j++) {
            tt[j] = t[i];
            dz[j] = 0.5 * zx[j];
            ww[j] = wt[i] * zw[j];
            xx[j] = tx ? tx[i] : 0;
        }
        blw_point_sum(C->v, C->a, C->w, C->sv, C->sz, C->upper, nz, tt, dz, ww, xx, acc);
    }
}

/* log of the start-averaged density at decision time t (no gradient) */
static double start_avg(const gctx *C, double t)
{
    blw_acc acc = {-INFINITY, 0, {0}, 0};
    double one = 1;
    if (t > 0) add_rows(C, 1, &t, &one, NULL, nodes_z(C, t), &acc);
    return acc_log(&acc);
}

/* Adds one Gauss sum given as its log L and its f-weighted mean derivatives g (blw_grid_large's result). */
static void acc_add_log(blw_acc *acc, double L, const double *g)
{
    if (L == -INFINITY) return;
    if (L > acc->mx) {
        double r = acc->mx == -INFINITY ? 0 : exp(acc->mx - L);
        acc->S *= r;
        if (acc->grad)
            for (int k = 0; k < BLW_GRID_NG; k++) acc->G[k] *= r;
        acc->mx = L;
    }
    double e = exp(L - acc->mx);
    acc->S += e;
    if (acc->grad)
        for (int k = 0; k < BLW_GRID_NG; k++) acc->G[k] += e * g[k];
}

/* Integral of the start-averaged density over [bot, top] (t >= BLW_TENSOR_U_MIN a^2, top <= 2 bot) as one factorised
 * tensor sum (blw_grid_large): the rules of window_panel for the times and nodes_z at bot for the starts.
 * Returns 0 when a rule asks for more than 40 nodes. */
static int tensor_panel(const gctx *C, double bot, double top, blw_acc *acc)
{
    double h = 0.5 * (top - bot), c = 0.5 * (top + bot);
    double E = h * fmax(fabs(slope_proxy(bot, C->vv, C->a, C->zmin, C->sv)),
                        fabs(slope_proxy(top, C->vv, C->a, C->zmin, C->sv)));
    double nf = 2.5 + 2.5 * sqrt(E) + 0.1 * E + 9 * h / c;
    int nz = nodes_z(C, bot);
    if (nf > 40 || nz > 40) return 0;
    int nt = nf < 2 ? 2 : (int)ceil(nf);
    const double *gx, *gw, *zx, *zw;
    blw_gauss_legendre(nt, &gx, &gw);
    blw_gauss_legendre(nz, &zx, &zw);
    double tt[BLW_GL_MAX], twt[BLW_GL_MAX], dz[BLW_GL_MAX], g[BLW_GRID_NG] = {0};
    for (int i = 0; i < nt; i++) {
        tt[i] = c + h * gx[i];
        twt[i] = 2 * h * gw[i];
    }
    for (int j = 0; j < nz; j++) dz[j] = 0.5 * zx[j];
    double L = blw_grid_large(C->v, C->a, C->w, C->sv, C->sz, C->upper, nt, tt, twt, NULL, nz, dz, zw,
                              acc->grad ? g : NULL);
    if (isnan(L)) return 0;
    acc_add_log(acc, L, g);
    return 1;
}

/* Integral over decision times [t1, t2] (0 <= t1 < t2 <= a^2/4) of the start-averaged density as the
 * difference of start averages of the CDF, avg F(t2) - avg F(t1), F the small-time series with drift_sd
 * in closed form (cdf_small_sv). Each average is a Gauss-Legendre sum over the start with the density's
 * rule at its own time (F(t, w') is smoother in w' than the density at t; docs/methods.md). Merged into
 * acc (gradient sums for a, v, w, sv, sz; the t-sums are not used by the caller). Returns 0 with nothing
 * merged when the difference would lose more than one digit (avg F(t2) > 10 times the difference: the
 * two averages use different start rules, so their quadrature errors do not cancel),
 * a start end lies within 1e-3 of a boundary, a rule asks for more than 40 nodes or a series fails:
 * the caller integrates over t instead. */
#define BLW_CDF_WINDOW_RATIO 0.25
#define BLW_CDF_EXTRA_NODES 2
static int cdf_start_avg(const gctx *C, double t, double *lF, double G[5])
{
    int nz = C->sz > 0 ? nodes_z(C, t) + BLW_CDF_EXTRA_NODES : 1, grad = G != NULL;
    if (nz > 40) return 0;
    static const double one = 1, zero = 0;
    const double *zx = &zero, *zw = &one;
    if (nz > 1) blw_gauss_legendre(nz, &zx, &zw);
    double mx = -INFINITY, S = 0, sg = C->upper ? -1 : 1;
    if (grad)
        for (int k = 0; k < 5; k++) G[k] = 0;
    for (int j = 0; j < nz; j++) {
        double wp = C->w + 0.5 * C->sz * zx[j];
        double W = C->upper ? 1 - wp : wp, Wcp = C->upper ? wp : 1 - wp;
        double l, d[4];
        if (!cdf_small_sv(t, C->vv, C->a, W, Wcp, C->sv, &l, grad ? d : NULL)) return 0;
        l += log(zw[j]);
        if (l > mx) {
            double r = mx == -INFINITY ? 0 : exp(mx - l);
            S *= r;
            if (grad)
                for (int k = 0; k < 5; k++) G[k] *= r;
            mx = l;
        }
        double e = exp(l - mx);
        S += e;
        if (!grad) continue;
        G[0] += e * d[0];
        G[1] += e * sg * d[1];
        G[2] += e * sg * d[2];
        G[3] += e * d[3];
        G[4] += e * sg * d[2] * 0.5 * zx[j];
    }
    if (!(S > 0)) return 0;
    *lF = mx + log(S);
    if (grad)
        for (int k = 0; k < 5; k++) G[k] /= S; /* d log(avg F) */
    return 1;
}

static int window_cdf_small(const gctx *C, double t1, double t2, blw_acc *acc)
{
    double Wc = C->upper ? 1 - C->w : C->w;
    if (!(Wc - 0.5 * C->sz > 1e-3) || !(Wc + 0.5 * C->sz < 1 - 1e-3) || !(t2 > t1)) return 0;
    /* two series per start node: cheaper than the Gauss rule over t only for windows reaching far
     * towards the onset (the t rule's node count grows like log(t2/t1) and the density's slope there) */
    if (t1 > BLW_CDF_WINDOW_RATIO * t2) return 0;
    int grad = acc->grad;
    double lh, ll = -INFINITY, gh[5], gl[5] = {0, 0, 0, 0, 0};
    if (!cdf_start_avg(C, t2, &lh, grad ? gh : NULL)) return 0;
    if (t1 > 0 && !cdf_start_avg(C, t1, &ll, grad ? gl : NULL)) return 0;
    double d = blw_logsubexp(lh, ll);
    if (!(d > -INFINITY) || lh - d > 2.3) return 0;
    double g[BLW_GRID_NG] = {0};
    if (grad) {
        double rh = exp(lh - d), rl = t1 > 0 ? exp(ll - d) : 0;
        for (int k = 0; k < 5; k++) g[k] = rh * gh[k] - rl * gl[k];
    }
    acc_add_log(acc, d, g);
    return 1;
}

/* Integral over [t1, t2] (0 < t1, t2 <= 4 t1, all in small time) of the start-averaged density as one
 * Gauss-Legendre panel over t with the start average in closed form at every node
 * (blw_start_window_small; one point without start_range). The node count is window_panel's rule applied
 * to the whole window: the start average is smoother in t than the density at the nearest start, for
 * which the rule was fitted (docs/methods.md checks it on windows up to t2 = 4 t1). Returns 0 with
 * nothing merged when the rule asks for more than BLW_SMALL_PANEL_MAX nodes or the closed form does
 * not apply (a start end within 1e-3 of a boundary): the caller takes the panels of ratio 2. */
#define BLW_SMALL_PANEL_MAX 16
static int small_panel(const gctx *C, double t1, double t2, blw_acc *acc)
{
    double Wc = C->upper ? 1 - C->w : C->w;
    if (C->sz > 0 && (!(Wc - 0.5 * C->sz > 1e-3) || !(Wc + 0.5 * C->sz < 1 - 1e-3))) return 0;
    double h = 0.5 * (t2 - t1), c = 0.5 * (t2 + t1);
    double E = h * fmax(fabs(slope_proxy(t1, C->vv, C->a, C->zmin, C->sv)),
                        fabs(slope_proxy(t2, C->vv, C->a, C->zmin, C->sv)));
    double nf = 2.5 + 2.5 * sqrt(E) + 0.1 * E + 9 * h / c;
    if (nf > BLW_SMALL_PANEL_MAX) return 0;
    int nt = nf < 2 ? 2 : (int)ceil(nf);
    const double *gx, *gw;
    blw_gauss_legendre(nt, &gx, &gw);
    blw_acc pan = {-INFINITY, 0, {0}, acc->grad};
    for (int i = 0; i < nt; i++) {
        double t = c + h * gx[i], wt = 2 * h * gw[i], dz = 0;
        if (C->sz == 0) blw_point_sum(C->v, C->a, C->w, C->sv, 0, C->upper, 1, &t, &dz, &wt, NULL, &pan);
        else if (!blw_start_window_small(t, C->v, C->a, C->w, C->sv, C->sz, C->upper, wt, 0, &pan)) return 0;
    }
    acc_merge(acc, &pan);
    return 1;
}

/* Integral over the window [max(lo, 0), hi] of the start-averaged density. The part above u = 1/4:
 * factorised tensor panels. The part below: CDF averages when it reaches below a quarter of its top
 * (window_cdf_small), else tensor panels down to u = BLW_TENSOR_U_MIN and one closed-form panel
 * (small_panel). Where those do not apply: Gauss-Legendre panels from the top downwards with ratio 2
 * (window_panel's rules, the start rule at each panel's lower end) and, when the window reaches the
 * onset, Gauss-Laguerre below m = min(hi, z_min^2/20) per start node (see window_integral).
 * Returns 0 when a panel would need more than 40 nodes (caller: general path). */
static int grid_window(const gctx *C, double lo, double hi, blw_acc *acc)
{
    double a = C->a, m = fmin(hi, 0.05 * C->zmin * C->zmin);
    double floor_ = lo > 0 ? lo : m, top = hi;
    int onset = lo <= 0;
    /* the part in the large-time range (t >= a^2/4): factorised tensor panels */
    double ts = BLW_U_SWITCH * a * a, tl = BLW_TENSOR_U_MIN * a * a, t1 = lo > 0 ? lo : 0;
    for (int k = 0; top > ts && top > floor_; k++) {
        double bot = fmax(fmax(floor_, ts), 0.5 * top);
        if (k > 60 || !tensor_panel(C, bot, top, acc)) return 0;
        top = bot;
    }
    if (top > floor_) {
        /* the part in the small-time range, reaching below top/4: CDF differences averaged over the start */
        if (t1 <= 0.25 * top && window_cdf_small(C, t1, top, acc)) return 1;
        /* else tensor panels continue down to u = BLW_TENSOR_U_MIN (more series terms) while the series
         * keeps its digits, and the rest is one panel with the start average in closed form */
        if (t1 > 0.25 * top) {
            for (int k = 0; top > fmax(t1, tl) && k < 60; k++) {
                double bot = fmax(fmax(t1, tl), 0.5 * top);
                if (!tensor_panel(C, bot, top, acc)) break;
                top = bot;
            }
            if (!(top > t1) || small_panel(C, t1, top, acc)) return 1;
        }
    }
    /* Node counts scale with log(1/tolerance): a part that carries a share s of the integral needs
     * only 1e-9/s relative accuracy, i.e. the fraction log(1e-9/s)/log(1e-9) of the nodes (at least
     * 0.3). Descending into the onset, each panel's share is estimated by the previous one's. */
    double fct = 1, rest = 0;
    for (int k = 0; top > floor_; k++) {
        if (k > 60) return 0;
        double bot = fmax(floor_, 0.5 * top), h = 0.5 * (top - bot), c = 0.5 * (top + bot);
        double E = h * fmax(fabs(slope_proxy(bot, C->vv, a, C->zmin, C->sv)),
                            fabs(slope_proxy(top, C->vv, a, C->zmin, C->sv)));
        double nf = fct * (2.5 + 2.5 * sqrt(E) + 0.1 * E + 9 * h / c);
        int nz = nodes_z(C, bot);
        if (nz > 1) nz = (int)ceil(fct * nz);
        if (nf > 40 || nz > 40) return 0;
        int nt = nf < 2 ? 2 : (int)ceil(nf);
        const double *gx, *gw;
        blw_gauss_legendre(nt, &gx, &gw);
        double tt[BLW_GL_MAX], wt[BLW_GL_MAX];
        for (int i = 0; i < nt; i++) {
            tt[i] = c + h * gx[i];
            wt[i] = 2 * h * gw[i];
        }
        /* the row nearest bot (Gauss-Legendre nodes ascend) first: its start average bounds the rest */
        blw_acc pan = {-INFINITY, 0, {0}, acc->grad};
        add_rows(C, 1, tt, wt, NULL, nz, &pan);
        double lrow = acc_log(&pan) - log(wt[0]);
        add_rows(C, nt - 1, tt + 1, wt + 1, NULL, nz, &pan);
        acc_merge(acc, &pan);
        double share = acc_log(&pan) - acc_log(acc); /* log of the panel's share, <= 0 */
        int rising = slope_proxy(top, C->vv, a, C->zmin, C->sv) > 0;
        /* below bot the density is rising: the rest is at most bot * f(bot) <= bot * f(first row) */
        rest = log(bot) + lrow - acc_log(acc);
        if (rising) fct = fmax(0.3, fmin(1, 1 + share / 20.7));
        if (rising && rest < -23) {
            onset = 0;
            break;
        }
        /* rising density and a share below 1e-10: what lies below is smaller still (f increases on
         * [0, top], so the rest is at most bot f(bot) <= this panel's sum) */
        if (share < -23 && slope_proxy(top, C->vv, a, C->zmin, C->sv) > 0) {
            onset = 0;
            break;
        }
        top = bot;
    }
    if (onset && m > 0) {
        const double *y, *lw, *zx = NULL, *zw = NULL;
        static const double zero = 0, one = 1;
        /* this part carries at most e^rest of the sum: looser start rule, and 8 Laguerre nodes when
         * e^rest < 1e-3 (8 nodes agree with 16 to 6e-10 over a grid: tests/test_wiener_regress.c) */
        double fl = fmax(0.3, fmin(fct, 1 + rest / 20.7));
        int nz = nodes_z(C, m);
        if (nz > 1) nz = (int)ceil(fl * nz);
        if (nz > 40) return 0;
        if (nz > 1) blw_gauss_legendre(nz, &zx, &zw);
        else {
            zx = &zero;
            zw = &one;
        }
        int nl = blw_gauss_laguerre(rest < -6.9, &y, &lw);
        double tt[BLW_GLAG_N], dz[BLW_GLAG_N], wt[BLW_GLAG_N];
        for (int j = 0; j < nz; j++) {
            double wp = C->w + 0.5 * C->sz * zx[j];
            double z = C->upper ? a * (1 - wp) : a * wp, beta = 0.5 * z * z;
            for (int l = 0; l < nl; l++) {
                double x = 1 / m + y[l] / beta;
                tt[l] = 1 / x;
                dz[l] = 0.5 * zx[j];
                wt[l] = zw[j] * exp(lw[l] + y[l]) / (x * x * beta);
            }
            blw_point_sum(C->v, a, C->w, C->sv, C->sz, C->upper, nl, tt, dz, wt, NULL, acc);
        }
    }
    return 1;
}

/* start_range and/or nondecision_range (any drift_sd) as Gauss sums over (decision time, start):
 * a window in the large-time range with lo >= hi/2 is one factorised tensor sum (blw_grid_large);
 * otherwise grid_window's panels. Gradients: under the sums; t0 and st through the ends of the window
 * (Leibniz rule, the start-averaged density at lo and hi). Returns 0 (caller takes the general path)
 * when a rule asks for more than 40 nodes. */
static int dens_grid(const bl_wiener_params *p, double rt, int upper, double *lfd, double *gd);

/* The nondecision and nondecision_range derivatives of a narrow window (st < 1e-3 of the decision time
 * c = rt - t0, away from the onset). The window formulas f(lo) - f(hi) and (f(hi) + f(lo)) / 2 - 1/st
 * (densities over the window's integral) difference two numbers of size 1/st that agree to O(st): a
 * 1e-10 error in each becomes 1e-10 / st in the result (1.6e-3 at st = 6e-8, enough to stop a fit near
 * st = 0). Here instead, from the Taylor expansion of the window average about c,
 * avg = f(c) + st^2 f''(c) / 24 + O(st^4): d ln avg / d st = st f''(c) / (12 f(c)) and
 * d ln avg / d t0 = -f'(c) / f(c) (to O(st^2) relative), with f' from the analytic gradient at st = 0 and
 * f''/f by central differences of the st = 0 density at c +- 0.01 c (truncation ~1e-4 relative,
 * rounding ~1e-6 / c^2 against f''/f ~ 1/c^2). Returns 0 when a point cannot be evaluated. */
static int narrow_window_grad(const bl_wiener_params *p, double rt, int upper, double c, double st, double *gd)
{
    bl_wiener_params q = *p;
    q.value[BL_NONDECISION_RANGE] = 0;
    double g0[BL_NPARAM], l0, lp, lm, d = 0.01 * c;
    if (!dens_grid(&q, rt, upper, &l0, g0) || !dens_grid(&q, rt + d, upper, &lp, NULL) ||
        !dens_grid(&q, rt - d, upper, &lm, NULL) || !isfinite(l0) || !isfinite(lp) || !isfinite(lm))
        return 0;
    double curv = (exp(lp - l0) - 2 + exp(lm - l0)) / (d * d);
    gd[BL_NONDECISION] = g0[BL_NONDECISION];
    gd[BL_NONDECISION_RANGE] = st * curv / 12;
    return 1;
}

static int dens_grid(const bl_wiener_params *p, double rt, int upper, double *lfd, double *gd)
{
    const double *x = p->value;
    double a = x[BL_THRESHOLD], v = x[BL_DRIFT], t0 = x[BL_NONDECISION], w = x[BL_START], sv = x[BL_DRIFT_SD];
    double sz = x[BL_START_RANGE], st = x[BL_NONDECISION_RANGE];
    double c = rt - t0, lo = c - 0.5 * st, hi = c + 0.5 * st;
    if (!(hi > 0)) return 0;
    double wb = upper ? 1 - w : w;
    double tref = lo > 0 ? lo : fmin(hi, 0.5 * a * a);
    gctx C = {a,
              v,
              w,
              sv,
              sz,
              fabs(v * a) + sv * sv * a * a * (fmax(w, 1 - w) + 0.5 * sz) / (1 + sv * sv * tref),
              a * (wb - 0.5 * sz),
              upper ? -v : v,
              upper};
    if (gd)
        for (int k = 0; k < BL_NPARAM; k++) gd[k] = 0;
    blw_acc acc = {-INFINITY, 0, {0}, gd != NULL};
    double g[BLW_GRID_NG];
    if (st == 0) {
        int nz = nodes_z(&C, c);
        if (nz > 40) return 0;
        if (c >= BLW_U_SWITCH * a * a) {
            const double *zx, *zw;
            double dz[BLW_GL_MAX];
            blw_gauss_legendre(nz, &zx, &zw);
            for (int j = 0; j < nz; j++) dz[j] = 0.5 * zx[j];
            double one = 1;
            *lfd = blw_grid_large(v, a, w, sv, sz, upper, 1, &c, &one, NULL, nz, dz, zw, gd ? g : NULL);
        } else {
            double one = 1;
            add_rows(&C, 1, &c, &one, NULL, nz, &acc);
            *lfd = acc_log(&acc);
            for (int k = 0; k < BLW_GRID_NG; k++) g[k] = acc.S > 0 ? acc.G[k] / acc.S : 0;
        }
        if (gd && *lfd > -INFINITY) {
            gd[BL_THRESHOLD] = g[0];
            gd[BL_DRIFT] = g[1];
            gd[BL_START] = g[2];
            gd[BL_DRIFT_SD] = g[3];
            gd[BL_START_RANGE] = g[4];
            gd[BL_NONDECISION] = -g[5];
        }
        return 1;
    }
    if (lo >= 0.5 * hi && lo >= BLW_U_SWITCH * a * a) {
        /* one panel in large time: factorised tensor, derivative of the rule itself for t0 and st */
        double h = 0.5 * st;
        double E = h * fmax(fabs(slope_proxy(lo, C.vv, a, a * wb, sv)), fabs(slope_proxy(hi, C.vv, a, a * wb, sv)));
        double nf = 2.5 + 2.5 * sqrt(E) + 0.1 * E + 9 * h / c;
        int nz = nodes_z(&C, lo);
        if (nf > 40 || nz > 40) return 0;
        int nt = (int)ceil(nf);
        const double *gx, *gw, *zx, *zw;
        blw_gauss_legendre(nt, &gx, &gw);
        blw_gauss_legendre(nz, &zx, &zw);
        double tt[BLW_GL_MAX], tx[BLW_GL_MAX], dz[BLW_GL_MAX];
        for (int i = 0; i < nt; i++) {
            tt[i] = c + h * gx[i];
            tx[i] = 0.5 * gx[i];
        }
        for (int j = 0; j < nz; j++) dz[j] = 0.5 * zx[j];
        *lfd = blw_grid_large(v, a, w, sv, sz, upper, nt, tt, gw, tx, nz, dz, zw, gd ? g : NULL);
        if (gd && *lfd > -INFINITY) {
            gd[BL_THRESHOLD] = g[0];
            gd[BL_DRIFT] = g[1];
            gd[BL_START] = g[2];
            gd[BL_DRIFT_SD] = g[3];
            gd[BL_START_RANGE] = sz > 0 ? g[4] : 0;
            gd[BL_NONDECISION] = -g[5];
            gd[BL_NONDECISION_RANGE] = g[6];
        }
        return 1;
    }
    if (!grid_window(&C, lo, hi, &acc)) return 0;
    double lI = acc_log(&acc);
    *lfd = lI - log(lo > 0 ? hi - lo : st);
    if (!gd || lI == -INFINITY) return 1;
    gd[BL_THRESHOLD] = acc.G[0] / acc.S;
    gd[BL_DRIFT] = acc.G[1] / acc.S;
    gd[BL_START] = acc.G[2] / acc.S;
    gd[BL_DRIFT_SD] = acc.G[3] / acc.S;
    gd[BL_START_RANGE] = acc.G[4] / acc.S;
    if (lo > 0 && st < 1e-3 * c && narrow_window_grad(p, rt, upper, c, st, gd)) return 1;
    double fh = exp(start_avg(&C, hi) - lI), fl = lo > 0 ? exp(start_avg(&C, lo) - lI) : 0;
    gd[BL_NONDECISION] = fl - fh;
    gd[BL_NONDECISION_RANGE] = 0.5 * (fh + fl) - 1 / st;
    return 1;
}

bl_status blw_log_density_full(const bl_wiener_params *p, double rt, int upper, double *ld, double *grad, bl_error *err)
{
    if (!blw_tables_ok()) return bl_error_set(err, BL_ERR_NOMEM, "cannot build the quadrature tables");
    const double *x = p->value;
    double w = x[BL_START], sz = x[BL_START_RANGE];
    double p0 = x[BL_CONTAMINATION];
    double lfd, gd[BL_NPARAM];
    bl_status s;
    if (dens_grid(p, rt, upper, &lfd, grad ? gd : NULL)) s = BL_OK;
    else if (sz == 0) s = dens_one_start(p, rt, w, upper, &lfd, grad ? gd : NULL);
    else s = dens_start_range(p, rt, upper, &lfd, grad ? gd : NULL);
    if (s) return bl_error_set(err, s, "Wiener CDF series did not converge at rt %g", rt);
    double lo = p->contamination_lo, hi = p->contamination_hi;
    double c = (lo < hi && rt >= lo && rt <= hi) ? 0.5 / (hi - lo) : 0;
    if (p0 > 0) {
        double a1 = log1p(-p0) + lfd, a2 = c > 0 ? log(p0 * c) : -INFINITY;
        *ld = blw_logaddexp(a1, a2);
        if (grad) {
            if (*ld == -INFINITY) {
                for (int j = 0; j < BL_NPARAM; j++) grad[j] = 0;
            } else {
                double pd = exp(a1 - *ld);
                for (int j = 0; j < BL_NPARAM; j++) grad[j] = pd * gd[j];
                grad[BL_CONTAMINATION] = (c > 0 ? exp(log(c) - *ld) : 0) - (lfd == -INFINITY ? 0 : exp(lfd - *ld));
            }
        }
    } else {
        *ld = lfd;
        if (grad) {
            if (lfd == -INFINITY) {
                for (int j = 0; j < BL_NPARAM; j++) grad[j] = 0;
            } else {
                for (int j = 0; j < BL_NPARAM; j++) grad[j] = gd[j];
                grad[BL_CONTAMINATION] = (c > 0 ? exp(log(c) - lfd) : 0) - 1;
            }
        }
    }
    if (isnan(*ld)) return bl_error_set(err, BL_ERR_NUMERIC, "log-density is not a number at rt %g", rt);
    return BL_OK;
}

/* ---- CDF with variability ----------------------------------------------------------------------- */
