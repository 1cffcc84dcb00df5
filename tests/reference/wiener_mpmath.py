#!/usr/bin/env python3
"""Live high-precision check of `bandlink predict --json` against mpmath (40 digits).

Reference formulas, evaluated independently here:
- first-passage density: Navarro & Fuss (2009, J. Math. Psych. 53:222-230) small-time image series
  (u < 1) and large-time Fourier series (u >= 1), each summed far past double precision;
- boundary probability: gambler's-ruin closed form (Cox & Miller 1965);
- mean decision time: [a coth(va) - z coth(vz)] / v (Laplace transform of the first-passage time);
- CDF: the large-time series integrated term by term, checked at the returned quantiles;
- drift_sd, start_range, nondecision_range: mpmath.quad over the normal drift, the uniform start and
  the uniform non-decision time of the plain density.
Exits 77 (meson "skipped") when mpmath is not installed.
"""
import json
import os
import subprocess
import sys

try:
    import mpmath as mp
except ImportError:
    print("mpmath not installed: skipped")
    sys.exit(77)

mp.mp.dps = 40
BANDLINK = os.environ.get("BANDLINK", "build/bandlink")
failures = 0
checks = 0


def check(ok, msg):
    global failures, checks
    checks += 1
    print(("PASS: " if ok else "FAIL: ") + msg)
    if not ok:
        failures += 1


def f_lo(t, v, a, w):
    t, v, a, w = mp.mpf(t), mp.mpf(v), mp.mpf(a), mp.mpf(w)
    if t <= 0:
        return mp.mpf(0)
    u = t / a**2
    pre = mp.exp(-v * a * w - v * v * t / 2) / a**2
    if u < 1:
        # |k| <= 8 leaves terms below exp(-(16 - 1)^2 / 2) ~ 1e-49 relative at u < 1
        s = mp.fsum((w + 2 * k) * mp.exp(-(w + 2 * k) ** 2 / (2 * u)) for k in range(-8, 9))
        return pre * s / mp.sqrt(2 * mp.pi * u**3)
    s, k = mp.mpf(0), 1
    while True:
        term = k * mp.exp(-k * k * mp.pi**2 * u / 2) * mp.sin(k * mp.pi * w)
        s += term
        if k > 3 and abs(term) < mp.mpf(10) ** -(mp.mp.dps + 10) * abs(s):
            break
        k += 1
    return pre * mp.pi * s


def f_b(t, v, a, w, upper):
    # 1 - w in mpmath, not in binary floating point
    return f_lo(t, -v, a, 1 - mp.mpf(w)) if upper else f_lo(t, v, a, w)


def p_lo(v, a, w):
    v, a, w = mp.mpf(v), mp.mpf(a), mp.mpf(w)
    if v == 0:
        return 1 - w
    return (mp.exp(-2 * v * a * w) - mp.exp(-2 * v * a)) / (1 - mp.exp(-2 * v * a))


def p_b(v, a, w, upper):
    return p_lo(-v, a, 1 - mp.mpf(w)) if upper else p_lo(v, a, w)


def mean_b(v, a, w, upper):
    v, a, w = mp.mpf(v), mp.mpf(a), mp.mpf(w)
    z = a * w if upper else a * (1 - w)
    vv = v if upper else -v
    if abs(vv * a) < mp.mpf(10) ** -(mp.mp.dps // 3):
        # the coth terms cancel near v = 0 (a quadrature node can fall there): series of the
        # numerics notes, section 3, error O((va)^4)
        return (a * a - z * z) / 3 - (a**4 - z**4) * vv * vv / 45
    return (a * mp.coth(vv * a) - z * mp.coth(vv * z)) / vv


def surv_lo(t, v, a, w):
    """P(T > t, lower): the large-time series integrated term by term."""
    t, v, a, w = mp.mpf(t), mp.mpf(v), mp.mpf(a), mp.mpf(w)
    q = mp.pi**2 * t / (2 * a * a)
    s, k = mp.mpf(0), 1
    while True:
        term = k * mp.sin(k * mp.pi * w) * mp.exp(-k * k * q) / (v * v * a * a + k * k * mp.pi**2)
        s += term
        if k > 3 and mp.exp(-k * k * q) < mp.mpf(10) ** -(mp.mp.dps + 5):
            break
        k += 1
    return 2 * mp.pi * mp.exp(-v * a * w - v * v * t / 2) * s


def cdf_b(t, v, a, w, upper):
    if t <= 0:
        return mp.mpf(0)
    if mp.mpf(t) / mp.mpf(a) ** 2 < 1e-3:
        # very short times (the large-time series would need ~1/sqrt(u) terms): integrate the
        # small-time density
        return mp.quad(lambda s: f_b(s, v, a, w, upper), [0, t])
    if upper:
        v, w = -v, 1 - mp.mpf(w)
    return p_lo(v, a, w) - surv_lo(t, v, a, w)


def predict(args, rts):
    cmd = [BANDLINK, "predict"] + args + ["--rt", ",".join(repr(r) for r in rts), "--json"]
    res = subprocess.run(cmd, capture_output=True, text=True)
    if res.returncode != 0:
        raise SystemExit("bandlink predict failed: %s\n%s" % (" ".join(cmd), res.stderr))
    return json.loads(res.stdout)


def rel(x, y):
    x, y = mp.mpf(x), mp.mpf(y)
    return abs(x - y) / abs(y) if y != 0 else abs(x)


def plain_case(a, v, t0, w, rts):
    d = predict(["--threshold", repr(a), "--drift", repr(v), "--nondecision", repr(t0), "--start", repr(w)], rts)
    for upper, name in ((1, "upper"), (0, "lower")):
        P = p_b(v, a, w, upper)
        check(rel(d["p_" + name], P) < 1e-13, "a=%g v=%g w=%g: p_%s %r vs mpmath %s" % (a, v, w, name, d["p_" + name], mp.nstr(P, 17)))
        m = mean_b(v, a, w, upper) + t0
        check(rel(d["mean_rt_" + name], m) < 1e-12, "a=%g v=%g w=%g: mean_rt_%s vs mpmath" % (a, v, w, name))
        for e in d["density"]:
            ref = f_b(e["rt"] - t0, v, a, w, upper)
            if ref < mp.mpf(10) ** -300:
                check(e[name] < 1e-290, "density ~0 at rt %g" % e["rt"])
                continue
            # series truncated at 1e-10 relative to the partial sum (numerics notes 1.3)
            check(rel(e[name], ref) < 2e-10, "a=%g v=%g w=%g: density %s at rt %g: %r vs mpmath %s" % (a, v, w, name, e["rt"], e[name], mp.nstr(ref, 17)))
        for p, q in zip(d["quantiles"]["probabilities"], d["quantiles"][name]):
            # an RT in double carries ~1e-16 relative resolution: accept p anywhere between the CDF
            # at q -+ 4 ulp (matters only for decision times far below t0), plus 1e-10
            qm, qp = mp.mpf(q) * (1 - mp.mpf(4e-16)), mp.mpf(q) * (1 + mp.mpf(4e-16))
            Fm = cdf_b(qm - t0, v, a, w, upper) / P
            Fp = cdf_b(qp - t0, v, a, w, upper) / P
            F = cdf_b(mp.mpf(q) - t0, v, a, w, upper) / P
            check(Fm - 1e-10 <= p <= Fp + 1e-10, "a=%g v=%g w=%g: %s quantile %g at %r: mpmath CDF/P = %s" % (a, v, w, name, p, q, mp.nstr(F, 14)))


def variability_case():
    # integrals to ~1e-12 need no more than 20 digits
    mp.mp.dps = 20
    a, v, t0, w, sv, sz, st = 1.2, 1.0, 0.3, 0.45, 0.8, 0.2, 0.1
    rts = [0.36, 0.5, 0.9, 1.7]
    base = ["--threshold", repr(a), "--drift", repr(v), "--nondecision", repr(t0), "--start", repr(w)]
    # drift_sd: integral over the normal drift
    d = predict(base + ["--drift-sd", repr(sv)], rts)
    for upper, name in ((1, "upper"), (0, "lower")):
        for e in d["density"]:
            ref = mp.quad(lambda nu: f_b(e["rt"] - t0, nu, a, w, upper) * mp.npdf(nu, v, sv), [-mp.inf, v, mp.inf])
            check(rel(e[name], ref) < 1e-10, "drift_sd %g: density %s at rt %g vs mpmath.quad over drift" % (sv, name, e["rt"]))
        Pref = mp.quad(lambda nu: p_b(nu, a, w, upper) * mp.npdf(nu, v, sv), [-mp.inf, v, mp.inf])
        check(rel(d["p_" + name], Pref) < 1e-9, "drift_sd %g: p_%s vs mpmath.quad" % (sv, name))
        Mref = mp.quad(lambda nu: p_b(nu, a, w, upper) * mean_b(nu, a, w, upper) * mp.npdf(nu, v, sv), [-mp.inf, v, mp.inf]) / Pref
        check(rel(d["mean_rt_" + name], Mref + t0) < 1e-9, "drift_sd %g: mean_rt_%s vs mpmath.quad" % (sv, name))
        for p, q in list(zip(d["quantiles"]["probabilities"], d["quantiles"][name]))[::2]:
            F = mp.quad(lambda nu: cdf_b(mp.mpf(q) - t0, nu, a, w, upper) * mp.npdf(nu, v, sv), [-mp.inf, v, mp.inf]) / Pref
            check(abs(F - p) < 1e-8, "drift_sd %g: %s quantile %g at %r: mpmath CDF/P = %s" % (sv, name, p, q, mp.nstr(F, 12)))
    # start_range: integral over the uniform start
    d = predict(base + ["--start-range", repr(sz)], rts)
    for upper, name in ((1, "upper"), (0, "lower")):
        for e in d["density"]:
            ref = mp.quad(lambda ww: f_b(e["rt"] - t0, v, a, ww, upper), [w - sz / 2, w + sz / 2]) / sz
            check(rel(e[name], ref) < 1e-6, "start_range %g: density %s at rt %g vs mpmath.quad over start" % (sz, name, e["rt"]))
    # nondecision_range: integral over the uniform non-decision time
    d = predict(base + ["--nondecision-range", repr(st)], rts)
    for upper, name in ((1, "upper"), (0, "lower")):
        for e in d["density"]:
            hi = min(t0 + st / 2, e["rt"])
            lo = t0 - st / 2
            ref = mp.quad(lambda tt: f_b(e["rt"] - tt, v, a, w, upper), [lo, hi]) / st if hi > lo else mp.mpf(0)
            check(rel(e[name], ref) < 1e-9, "nondecision_range %g: density %s at rt %g vs mpmath.quad over t0" % (st, name, e["rt"]))


def f_sv_b(t, v, a, w, sv, upper):
    """drift_sd closed form (Blurton, Kesselmeier & Gondan 2017, J. Math. Psych. 76:7-12): the plain
    series at drift 0 times exp((sv^2 z^2 - 2 v z - v^2 t) / (2D)) / sqrt(D), D = 1 + sv^2 t, z the
    distance of the start to the boundary; checked below against mpmath.quad over the drift."""
    t, v, a, sv = mp.mpf(t), mp.mpf(v), mp.mpf(a), mp.mpf(sv)
    if t <= 0:
        return mp.mpf(0)
    ww = 1 - mp.mpf(w) if upper else mp.mpf(w)
    vv = -v if upper else v
    D = 1 + sv * sv * t
    z = a * ww
    return f_lo(t, 0, a, ww) * mp.exp((sv * sv * z * z - 2 * vv * z - vv * vv * t) / (2 * D)) / mp.sqrt(D)


def regression_cases():
    """Cases where the engine was once wrong; references by mpmath quadrature of the series."""
    mp.mp.dps = 25
    # nondecision_range at a|v| = 24, slow RT in small time: the CDF difference cancelled to exactly 0
    a, v, t0, st = 4.0, 6.0, 0.4, 0.1
    d = predict(["--threshold", "4", "--drift", "6", "--nondecision", "0.4", "--nondecision-range", "0.1"], [1.5, 2.9, 3.6])
    for upper, name in ((1, "upper"), (0, "lower")):
        for e in d["density"]:
            ref = mp.quad(lambda tt: f_b(e["rt"] - tt, v, a, 0.5, upper), [t0 - st / 2, t0 + st / 2]) / st
            check(rel(e[name], ref) < 1e-8, "a=4 v=6 nondecision_range 0.1: density %s at rt %g %r vs mpmath %s" % (name, e["rt"], e[name], mp.nstr(ref, 12)))
    # the closed form used below equals the integral over the normal drift
    ref = mp.quad(lambda nu: f_b(2.1, nu, 3.0, 0.4, 1) * mp.npdf(nu, 0.5, 2.0), [-mp.inf, 0.5, mp.inf])
    check(rel(f_sv_b(2.1, 0.5, 3.0, 0.4, 2.0, 1), ref) < 1e-15, "drift_sd closed form = mpmath.quad over the drift")
    # drift_sd + nondecision_range with the window in u = t/a^2 in [0.1, 0.3)
    for a, v, sv, st, rts in ((4.0, 0.0, 2.5, 0.3, [2.3, 3.2, 4.39]), (3.0, 0.8, 2.0, 0.2, [1.5, 2.2, 2.6])):
        t0 = 0.4
        d = predict(["--threshold", repr(a), "--drift", repr(v), "--nondecision", "0.4", "--drift-sd", repr(sv),
                     "--nondecision-range", repr(st)], rts)
        for upper, name in ((1, "upper"), (0, "lower")):
            for e in d["density"]:
                ref = mp.quad(lambda tt: f_sv_b(e["rt"] - tt, v, a, 0.5, sv, upper), [t0 - st / 2, t0, t0 + st / 2]) / st
                check(rel(e[name], ref) < 1e-8, "a=%g sv=%g st=%g: density %s at rt %g %r vs mpmath %s" % (a, sv, st, name, e["rt"], e[name], mp.nstr(ref, 12)))
    # start_range with a|v|sz = 27: the node rule must follow the factor exp(-v a w') across the range
    a, v, sz, t0 = 5.0, 6.0, 0.9, 0.3
    d = predict(["--threshold", "5", "--drift", "6", "--start-range", "0.9", "--nondecision", "0.3"], [0.6, 1.3, 2.5])
    for upper, name in ((1, "upper"), (0, "lower")):
        for e in d["density"]:
            ref = mp.quad(lambda ww: f_b(e["rt"] - t0, v, a, ww, upper), mp.linspace(0.5 - sz / 2, 0.5 + sz / 2, 7)) / sz
            check(rel(e[name], ref) < 1e-8, "a=5 v=6 start_range 0.9: density %s at rt %g %r vs mpmath %s" % (name, e["rt"], e[name], mp.nstr(ref, 12)))
    # all three together, RTs from inside the onset window to the slow tail: mpmath.quad over t0' and w'
    a, v, t0, sv, sz, st = 1.5, 2.5, 0.3, 1.8, 0.43, 0.13
    mp.mp.dps = 15
    d = predict(["--threshold", "1.5", "--drift", "2.5", "--nondecision", "0.3", "--drift-sd", "1.8",
                 "--start-range", "0.43", "--nondecision-range", "0.13"], [0.3, 0.36, 0.5, 1.2])
    for upper, name in ((1, "upper"), (0, "lower")):
        for e in d["density"]:
            hi = min(t0 + st / 2, e["rt"])
            ref = mp.quad(lambda tt, ww: f_sv_b(e["rt"] - tt, v, a, ww, sv, upper), [t0 - st / 2, hi], [0.5 - sz / 2, 0.5, 0.5 + sz / 2]) / (st * sz)
            check(rel(e[name], ref) < 1e-7, "drift_sd+start_range+nondecision_range: density %s at rt %g %r vs mpmath %s" % (name, e["rt"], e[name], mp.nstr(ref, 12)))
    mp.mp.dps = 25
    # P(boundary) and mean RT with drift_sd for a rare boundary: the integrand peaks 9 SD out
    a, v, w, sv, t0 = 5.0, -10.0, 0.1, 1.0, 0.3
    d = predict(["--threshold", "5", "--drift", "-10", "--start", "0.1", "--drift-sd", "1", "--nondecision", "0.3"], [1.0])
    for upper, name in ((1, "upper"), (0, "lower")):
        pts = [-mp.inf, -20, -10, -5, 0, mp.inf]
        Pref = mp.quad(lambda nu: p_b(nu, a, w, upper) * mp.npdf(nu, v, sv), pts)
        check(rel(d["p_" + name], Pref) < 1e-9, "a=5 v=-10 w=0.1 sv=1: p_%s %r vs mpmath %s" % (name, d["p_" + name], mp.nstr(Pref, 12)))
        Mref = mp.quad(lambda nu: p_b(nu, a, w, upper) * mean_b(nu, a, w, upper) * mp.npdf(nu, v, sv), pts) / Pref + t0
        check(rel(d["mean_rt_" + name], Mref) < 1e-9, "a=5 v=-10 w=0.1 sv=1: mean_rt_%s %r vs mpmath %s" % (name, d["mean_rt_" + name], mp.nstr(Mref, 12)))
    mp.mp.dps = 40


regression_cases()
plain_case(1.0, 1.0, 0.0, 0.5, [0.05, 0.35, 1.0, 3.0])
plain_case(2.0, -1.5, 0.2, 0.3, [0.25, 0.6, 1.1, 4.0])
plain_case(1.5, 2.0, 0.3, 0.6, [0.31, 0.35, 0.8, 2.5])
plain_case(0.6, 0.0, 0.25, 0.5, [0.27, 0.4, 1.5])
plain_case(4.0, -6.0, 0.1, 0.9, [0.15, 0.6, 2.0])
plain_case(2.5, 4.0, 0.2, 0.15, [0.22, 0.5, 1.2, 6.0])
plain_case(1.1, 0.7, 0.3, 0.999, [0.302, 0.35, 0.7, 1.5])
# a start within 1e-9 of the lower boundary: the upper boundary's far-side images nearly cancel
plain_case(1.3, -0.4, 0.2, 1e-9, [0.25, 0.4, 0.9, 2.5])
variability_case()
print("%d checks passed, %d failed" % (checks - failures, failures))
sys.exit(1 if failures else 0)
