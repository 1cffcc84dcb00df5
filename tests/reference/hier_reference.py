#!/usr/bin/python3
"""Outside references for hierarchical fits (tests/cli/hier_bruteforce.sh, hier_limits.sh).

  hier_reference.py trials OUT.csv PARTICIPANTS TRIALS SEED SD_THRESHOLD SD_DRIFT SD_NONDECISION [easy]
      Invented trials: a Wiener process (noise scale 1, start midway) simulated by an Euler random walk
      (numpy, seeded, step 0.2 ms): threshold 1.4, drift 1.2 for "easy" and 0.6 for "hard" stimuli,
      nondecision 0.3 s, each plus SD * z_j for participant j (z_j evenly spaced in [-1.2, 1.2], in a
      different order for each parameter). Accuracy coding (correct 1/0). A last argument "easy": every
      trial easy.
      The walk's small overshoot bias does not matter: the checks hold for whatever data are fitted.

  hier_reference.py check FITS_GH20.json FITS_LAPLACE.json TRIALS.csv MODEL
      Brute-force marginal log-likelihood of MODEL at the estimates in each FITS.json:
          sum_j ln Int prod_i f(rt_ij, resp_ij | beta + sd * z) phi(z) dz
      with one varying threshold intercept, f the Wiener first-passage density coded here from the
      large- and small-time series of Navarro & Fuss 2009 (J. Math. Psych. 53:222-230; the series as
      remembered, checked below against each other), never calling bandlink, and the integral by
      scipy.integrate.quad over the standard-normal effect. Prints PASS/FAIL lines: Gauss-Hermite equal
      to it to 1e-6, the estimates a maximum of it, Laplace off it by its own leading error term.

Exit 77 (skipped) when numpy or scipy is missing.
"""
import csv
import json
import math
import sys
import warnings

try:
    import numpy as np
    from scipy import integrate, optimize
except ImportError as e:  # the test is skipped, not failed
    print("skipped: %s" % e)
    sys.exit(77)

LOG_SQRT_2PI = 0.5 * math.log(2 * math.pi)


def spaced(n_part, shift):
    """Participant offsets in SD units, evenly spaced in [-1.2, 1.2] (so the spread is there by design, not
    by chance), rotated by `shift` so that the offsets of different parameters are not in step."""
    z = [0.0] if n_part == 1 else [-1.2 + 2.4 * j / (n_part - 1) for j in range(n_part)]
    return [z[(j + shift) % n_part] for j in range(n_part)]


def simulate(out, n_part, n_trials, seed, sd_a, sd_v, sd_t0, all_easy=False):
    rng = np.random.default_rng(seed)
    dt = 2e-4
    rows = []
    za, zv, zt = spaced(n_part, 0), spaced(n_part, 1), spaced(n_part, 2)
    for j in range(n_part):
        a = max(1.4 + sd_a * za[j], 0.4)
        t0 = max(0.3 + sd_t0 * zt[j], 0.05)
        hard = np.zeros(n_trials, dtype=int) if all_easy else rng.integers(0, 2, n_trials)
        v = np.where(hard == 1, 0.6, 1.2) + sd_v * zv[j]
        x = np.full(n_trials, 0.5 * a)
        t = np.zeros(n_trials)
        alive = np.ones(n_trials, dtype=bool)
        while alive.any():
            k = np.flatnonzero(alive)
            x[k] += v[k] * dt + math.sqrt(dt) * rng.standard_normal(k.size)
            t[k] += dt
            alive[k[(x[k] <= 0) | (x[k] >= a)]] = False
        for i in range(n_trials):
            rows.append(("p%d" % (j + 1), "hard" if hard[i] else "easy", "%.5f" % (t[i] + t0),
                         1 if x[i] >= a else 0))
    with open(out, "w", newline="") as f:
        w = csv.writer(f, lineterminator="\n")
        w.writerow(["participant", "difficulty", "rt", "correct"])
        w.writerows(rows)


# ---- Wiener first-passage density at the lower boundary (Navarro & Fuss 2009), in logs ----
# f_lo(t | v, a, w) = a^-2 exp(-v a w - v^2 t / 2) phi(t / a^2 | w), with
#   large time: phi_L(u|w) = pi sum_{k>=1} k exp(-k^2 pi^2 u / 2) sin(k pi w)
#   small time: phi_S(u|w) = (2 pi u^3)^-1/2 sum_{k in Z} (w + 2k) exp(-(w + 2k)^2 / (2u))
# Both series are summed with far more terms than their truncation bounds need (40 and 2 x 12), so
# truncation is far below double rounding; the small-time series for u < 1, the large-time one above.
K_LARGE = np.arange(1, 41)
K_SMALL = np.arange(-12, 13)


def log_phi(u, w):
    u = np.asarray(u, dtype=float)
    out = np.empty_like(u)
    small = u < 1.0
    if small.any():
        us = u[small][:, None]
        x = w + 2 * K_SMALL[None, :]
        e = -(x * x) / (2 * us)
        m = e.max(axis=1, keepdims=True)
        s = (x * np.exp(e - m)).sum(axis=1)
        out[small] = -LOG_SQRT_2PI - 1.5 * np.log(us[:, 0]) + m[:, 0] + np.log(s)
    if (~small).any():
        ul = u[~small][:, None]
        k = K_LARGE[None, :]
        e = -(k * k) * math.pi ** 2 * ul / 2
        m = e[:, :1]
        s = (k * np.exp(e - m) * np.sin(k * math.pi * w)).sum(axis=1)
        out[~small] = math.log(math.pi) + m[:, 0] + np.log(s)
    return out


def log_density(t, upper, v, a, w):
    """ln f of decision times t (array) at the upper (True) or lower boundary, start w a scalar; upper by
    the mirror rule f_up(t|v,a,w) = f_lo(t|-v,a,1-w). Times <= 0 or a <= 0 give -inf."""
    t = np.asarray(t, dtype=float)
    if not a > 0:
        return np.full(t.shape, -np.inf)
    vv = np.where(upper, -v, v)
    ww = np.where(upper, 1 - w, w)
    out = np.full(t.shape, -np.inf)
    ok = t > 0
    if ok.any():
        u = t[ok] / a ** 2
        lp = np.where(upper[ok], log_phi(u, 1 - w), log_phi(u, w))
        out[ok] = -vv[ok] * a * ww[ok] - vv[ok] ** 2 * t[ok] / 2 - 2 * math.log(a) + lp
    return out


# ---- the study's model, read back from fits.json ----

def load_trials(path):
    data = {}
    with open(path) as f:
        for r in csv.DictReader(f):
            data.setdefault(r["participant"], []).append((r["difficulty"], float(r["rt"]), r["correct"] == "1"))
    return data


def participant_loglik_fn(rows, drift, t0):
    """a -> sum_i ln f(rt_i, resp_i | threshold a, drift of the trial's difficulty, t0, start 0.5)."""
    rt = np.array([r[1] for r in rows])
    upper = np.array([r[2] for r in rows])
    v = np.array([drift[r[0]] for r in rows])

    def ll(a):
        return float(log_density(rt - t0, upper, v, a, 0.5).sum())
    return ll


def effect_function(ll, beta_a, sd):
    """h(z) = ln prod_i f(. | beta_a + sd z) + ln phi(z): the log integrand over the standardised effect."""
    def h(z):
        val = ll(beta_a + sd * z)
        return (val if np.isfinite(val) else -np.inf) - 0.5 * z * z - LOG_SQRT_2PI
    return h


def mode(h):
    with warnings.catch_warnings():  # h is -inf where the threshold would be <= 0: Brent steps away
        warnings.simplefilter("ignore", RuntimeWarning)
        res = optimize.minimize_scalar(lambda z: -h(z), bounds=(-10.0, 10.0), method="bounded",
                                       options={"xatol": 1e-10})
    return res.x, -res.fun


def log_marginal(ll, beta_a, sd):
    """ln Int exp(h(z)) dz by scipy.integrate.quad (QUADPACK qagi on each side of the mode), scaled by
    the integrand's maximum so nothing underflows; the effect is integrated over the whole line."""
    if sd == 0:
        return ll(beta_a)
    h = effect_function(ll, beta_a, sd)
    zhat, hmax = mode(h)

    def g(z):
        return math.exp(h(z) - hmax)
    left = integrate.quad(g, -np.inf, zhat, epsabs=1e-13, epsrel=1e-12, limit=200)[0]
    right = integrate.quad(g, zhat, np.inf, epsabs=1e-13, epsrel=1e-12, limit=200)[0]
    return hmax + math.log(left + right)


def laplace(ll, beta_a, sd):
    """Laplace's approximation h(z^) + 1/2 ln(2 pi / H), H = -h''(z^) (Tierney & Kadane 1986), and the
    leading term of its error: ln(exact) - ln(Laplace) = h4 / (8 H^2) + 5 h3^2 / (24 H^3) + O(n^-2),
    the next terms of the same expansion (E z^4 = 3 / H^2 and E z^6 = 15 / H^3 under N(0, 1/H)).
    h3, h4 and H all grow like n, so the term is O(1/n) per participant. Derivatives by central
    differences: the 5-point rule for h'' (step 5e-3: truncation and rounding ~1e-10 relative), the
    7-point rules at step 2e-2 for the third and fourth derivatives (a few digits suffice there)."""
    h = effect_function(ll, beta_a, sd)
    z, hmax = mode(h)
    e = 5e-3
    H = -(-h(z + 2 * e) + 16 * h(z + e) - 30 * hmax + 16 * h(z - e) - h(z - 2 * e)) / (12 * e * e)
    d = 2e-2
    f = {k: h(z + k * d) for k in range(-3, 4)}
    h3 = (-f[3] + 8 * f[2] - 13 * f[1] + 13 * f[-1] - 8 * f[-2] + f[-3]) / (8 * d ** 3)
    h4 = (-f[3] + 12 * f[2] - 39 * f[1] + 56 * f[0] - 39 * f[-1] + 12 * f[-2] - f[-3]) / (6 * d ** 4)
    return hmax + 0.5 * math.log(2 * math.pi / H), h4 / (8 * H * H) + 5 * h3 * h3 / (24 * H ** 3)


class Study:
    """The test study's model (threshold intercept varying by participant; drift per difficulty; one
    nondecision; start 0.5) at the estimates of one model of fits.json."""

    def __init__(self, fits_path, trials_path, model_name):
        with open(fits_path) as f:
            fits = json.load(f)
        self.model = next(m for m in fits["models"] if m["name"] == model_name)
        vc = self.model["variance_components"]
        assert len(vc) == 1 and vc[0]["parameter"] == "threshold" and vc[0]["term"] == "intercept", vc
        self.sd = abs(vc[0]["sd"])
        self.coef = {(c["parameter"], c["level"]): (c["estimate"], c["se"]) for c in self.model["coefficients"]
                     if c["term"] == "intercept"}
        self.data = load_trials(trials_path)

    def participants(self, threshold=None, sd=None, drift_easy=None):
        """(trials, ll(a), threshold intercept, sd) per participant at the estimates, or with one moved."""
        drift = {"easy": self.coef[("drift", "easy")][0] if drift_easy is None else drift_easy,
                 "hard": self.coef[("drift", "hard")][0]}
        t0 = self.coef[("nondecision", "")][0]
        a = self.coef[("threshold", "")][0] if threshold is None else threshold
        s = self.sd if sd is None else sd
        return [(len(rows), participant_loglik_fn(rows, drift, t0), a, s) for _, rows in sorted(self.data.items())]

    def marginal(self, **moved):
        return sum(log_marginal(ll, a, s) for _, ll, a, s in self.participants(**moved))


def report(ok, what):
    print("%s: hier_reference.py: %s" % ("PASS" if ok else "FAIL", what))


def check_series():
    """The reference density's own check: the small- and large-time series are one function (Navarro &
    Fuss 2009), so they must agree where both converge."""
    for w in (0.5, 0.2):
        diff = 0.0
        for u in (0.3, 0.7, 1.5):
            x = w + 2 * K_SMALL
            small = -LOG_SQRT_2PI - 1.5 * math.log(u) + math.log((x * np.exp(-x * x / (2 * u))).sum())
            large = math.log(math.pi * (K_LARGE * np.exp(-K_LARGE ** 2 * math.pi ** 2 * u / 2)
                                        * np.sin(K_LARGE * math.pi * w)).sum())
            diff = max(diff, abs(small - large))
        report(diff < 1e-9, "small- and large-time series agree at w=%g: max |diff| %.2e (< 1e-9)" % (w, diff))


def check(fits_aghq, fits_laplace, trials_path, model_name):
    check_series()
    # 1. Adaptive Gauss-Hermite with 20 nodes (Pinheiro & Bates 1995) against quad: equal to 1e-6.
    st = Study(fits_aghq, trials_path, model_name)
    ref = st.marginal()
    got = st.model["log_likelihood"]
    report(abs(got - ref) <= 1e-6, "gauss-hermite 20 nodes: fits.json log_likelihood %.10f, scipy quad %.10f, "
           "|diff| %.2e (<= 1e-6)" % (got, ref, abs(got - ref)))
    # 2. The reported estimates maximise the marginal likelihood: moves of 0.1 SE in a coefficient
    #    (an expected drop of about 0.1^2 / 2 = 5e-3) and of 5% in the SD raise it by at most 1e-4.
    a, se_a = st.coef[("threshold", "")]
    v, se_v = st.coef[("drift", "easy")]
    moves = [("threshold intercept %+.4f" % (k * 0.1 * se_a), {"threshold": a + k * 0.1 * se_a}) for k in (-1, 1)]
    moves += [("drift easy %+.4f" % (k * 0.1 * se_v), {"drift_easy": v + k * 0.1 * se_v}) for k in (-1, 1)]
    moves += [("sd x %.2f" % f, {"sd": st.sd * f}) for f in (0.95, 1.05)]
    for what, moved in moves:
        val = st.marginal(**moved)
        report(val <= ref + 1e-4, "maximum: %s gives %.7f, not above %.7f + 1e-4 (drop %.2e)"
               % (what, val, ref, ref - val))
    # 3. Laplace: equal to the Laplace formula computed here, and off the exact marginal by its
    #    leading O(1/n_j) error term (the remainder is O(1/n_j^2) per participant).
    sl = Study(fits_laplace, trials_path, model_name)
    got = sl.model["log_likelihood"]
    exact = lap = corr = bound = 0.0
    for n, ll, a, s in sl.participants():
        exact += log_marginal(ll, a, s)
        value, term = laplace(ll, a, s)
        lap += value
        corr += term
        bound += 1.0 / n
    report(abs(got - lap) <= 1e-6, "laplace: fits.json log_likelihood %.10f, Laplace formula here %.10f, "
           "|diff| %.2e (<= 1e-6)" % (got, lap, abs(got - lap)))
    err = exact - got
    report(abs(err) <= bound, "laplace error (exact - laplace) %.3e within sum_j 1/n_j = %.3e (O(1/n) per "
           "participant)" % (err, bound))
    report(abs(err - corr) <= 0.2 * abs(corr) + 2e-5,
           "laplace error %.4e matches its leading term h4/(8H^2) + 5 h3^2/(24H^3) = %.4e (within 20%% + 2e-5)"
           % (err, corr))


def main(argv):
    if len(argv) >= 9 and argv[1] == "trials":
        simulate(argv[2], int(argv[3]), int(argv[4]), int(argv[5]), float(argv[6]), float(argv[7]), float(argv[8]),
                 "easy" in argv[9:])
    elif len(argv) >= 6 and argv[1] == "check":
        check(argv[2], argv[3], argv[4], argv[5])
    else:
        print(__doc__)
        return 2
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv))
