"""Welch configurations checked against scipy.signal.welch (shared by the live test and the fixture writer).
Each case: name, n (samples), fs, nperseg, noverlap, nfft, detrend, average, scaling, seed."""
CASES = [
    # name          n     fs      nperseg noverlap nfft  detrend     average   scaling    seed
    ("even256",     1024, 1000.0, 256,   128,  256,  "constant", "mean",   "density",  1),
    ("odd257",      1100, 500.0,  257,   128,  257,  "constant", "mean",   "density",  2),
    ("prime251",    1000, 250.0,  251,   100,  251,  "linear",   "mean",   "density",  3),
    ("nooverlap",   2000, 2000.0, 500,   0,    500,  "constant", "mean",   "density",  4),
    ("tail",        2047, 1000.0, 512,   384,  512,  "none",     "mean",   "density",  5),
    ("zeropad",     1500, 1000.0, 300,   150,  512,  "constant", "mean",   "density",  6),
    ("spectrum",    1200, 600.0,  200,   100,  200,  "constant", "mean",   "spectrum", 7),
    ("median3",     1024, 1000.0, 512,   256,  512,  "constant", "median", "density",  8),
    ("median4",     1280, 1000.0, 512,   256,  512,  "linear",   "median", "density",  9),
    ("median5",     1536, 1000.0, 512,   256,  512,  "none",     "median", "density",  10),
    ("single",      500,  1000.0, 500,   0,    500,  "constant", "mean",   "density",  11),
    ("odd_nfft",    999,  1000.0, 333,   111,  333,  "linear",   "mean",   "density",  12),
]


def signal(n, fs, seed):
    """A test signal: white noise, two sines, an offset and a slow drift (so detrending matters)."""
    import numpy as np
    rng = np.random.default_rng(seed)
    t = np.arange(n) / fs
    return (rng.standard_normal(n) + 2.0 * np.sin(2 * np.pi * 0.1 * fs * t)
            + 0.5 * np.cos(2 * np.pi * 0.23 * fs * t + 0.3) + 3.0 + 0.8 * t * fs / n)


def reference(x, case):
    from scipy.signal import welch
    name, n, fs, nperseg, noverlap, nfft, detrend, average, scaling, seed = case
    f, p = welch(x, fs=fs, window="hann", nperseg=nperseg, noverlap=noverlap, nfft=nfft,
                 detrend=False if detrend == "none" else detrend, scaling=scaling, average=average)
    return f, p
