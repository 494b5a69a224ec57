"""Start values of the spectrum fit: peak spacing and phase from the Fourier transform, then the peaks."""

from __future__ import annotations

import numpy as np

from compensator.calibration.spectrum.histogram import _check_histogram, _edges_from_centres, _fill_gaps
from compensator.calibration.spectrum.model import _peaks_needed
from compensator.errors import ModelError

__all__ = ["spectrum_start_values"]

def _uniform_density(x, c):
    """Counts per unit charge resampled on a uniform grid (for the FFT)."""
    dx = np.diff(x)
    if dx.max() <= dx.min() * 1.001:
        return x, c, float(np.mean(dx))
    step = float(dx.min())
    n = int(min(np.ceil((x[-1] - x[0]) / step) + 1, 16384))
    grid = np.linspace(x[0], x[-1], n)
    widths = np.diff(_edges_from_centres(x))
    dens = np.interp(grid, x, c / widths) * (grid[1] - grid[0])
    return grid, dens, float(grid[1] - grid[0])


def _comb_from_fft(x, c):
    """Peak spacing and comb phase from the Fourier transform.

    The spectrum is variance-stabilised (square root of the counts) and
    resampled on a uniform grid. Its transform ``Y(f)`` shows a lobe around
    zero frequency (the envelope) and a line at ``1/G`` (the comb of peaks),
    with harmonics. Candidates are the local maxima of ``|f Y(f)|`` (the
    transform of the first difference, which turns the line into a maximum even
    on the flank of the lobe) beyond the lobe; a candidate must rise above the
    lowest point between the lobe and itself by five times the noise
    (``Var sqrt(n) <= 0.42`` per occupied bin for Poisson counts), and the
    strongest one wins. The phase of ``Y`` at the line
    gives the comb offset. Octave errors (a harmonic or sub-harmonic picked
    instead of the fundamental) are caught later in the charge domain.

    Returns (spacing, offset, significance): peaks sit at
    ``offset + n spacing``; significance is the line over the noise rms.
    """
    grid, dens, step = _uniform_density(x, c)
    y = np.sqrt(np.clip(dens, 0.0, None))
    n = y.size
    if n < 8:
        raise ModelError("spectrum: too few bins to find a peak structure")
    # take out the straight line between the mean end values, so a histogram
    # cut off with counts at its ends does not ring like a box
    k_end = max(2, n // 50)
    y_lo, y_hi = float(y[:k_end].mean()), float(y[-k_end:].mean())
    y_flat = y - (y_lo + (y_hi - y_lo) * np.arange(n) / (n - 1))
    m = 1 << int(np.ceil(np.log2(8 * n)))
    spec_y = np.fft.rfft(y_flat, m)
    freq = np.fft.rfftfreq(m, step)
    amp_y = np.abs(spec_y)
    amp = amp_y * np.abs(2.0 * np.sin(np.pi * freq * step))  # transform of the difference
    noise = np.sqrt(0.42 * max(int(np.count_nonzero(dens > 0)), 1))
    # skip the lobe around zero frequency: the envelope of the sqrt spectrum
    # has an rms width s, its transform a width 1/(2 pi s); start one width
    # out, then walk down to the first minimum
    w = np.clip(y, 0.0, None)
    centre = np.sum(w * grid) / np.sum(w)
    s_env = np.sqrt(np.sum(w * (grid - centre) ** 2) / np.sum(w))
    i = max(int(np.ceil(1.0 / (2.0 * np.pi * s_env) * m * step)), int(np.ceil(m / n)), 1)
    while i + 1 < amp.size and amp[i + 1] <= amp[i]:
        i += 1
    inner = amp[i:-1]
    is_max = np.r_[False, (inner[1:-1] > inner[:-2]) & (inner[1:-1] >= inner[2:]), False]
    cand = i + np.flatnonzero(is_max)
    # significance: height of the line above the lowest point between the
    # lobe and the line, in units of the noise rms at that frequency
    noise_d = noise * np.abs(2.0 * np.sin(np.pi * freq * step))
    floor = np.minimum.accumulate(amp[i:])[cand - i]
    signif = (amp[cand] - floor) / noise_d[cand]
    keep = signif > 5.0
    if not keep.any():
        raise ModelError("spectrum: no peak structure found (no comb line above the noise in the Fourier transform)")
    j = int(cand[keep][np.argmax(amp[cand[keep]])])
    # parabolic interpolation of the line position
    a, b, cc = np.log(amp[j - 1:j + 2] + 1e-300)
    den = a - 2 * b + cc
    delta = float(np.clip(0.5 * (a - cc) / den, -0.5, 0.5)) if den < 0 else 0.0
    f0 = (j + delta) / (m * step)
    spacing = 1.0 / f0
    # phase: the transform of y at f0 exactly
    phase = np.angle(np.sum(y * np.exp(-2j * np.pi * f0 * (grid - grid[0]))))
    offset = grid[0] - phase / (2 * np.pi * f0)
    return spacing, offset, float(signif[cand == j][0])


class _Counts:
    """A histogram with prefix sums: O(log n) window sums and moments.

    ``x`` must increase; a window ``[lo, hi)`` is the contiguous run of bins
    whose centres fall inside it.
    """

    def __init__(self, x, c):
        self.x, self.c = x, c
        self.s0 = np.concatenate(([0.0], np.cumsum(c)))
        self.s1 = np.concatenate(([0.0], np.cumsum(c * x)))
        self.s2 = np.concatenate(([0.0], np.cumsum(c * x * x)))
        kern = np.array([1.0, 2.0, 3.0, 2.0, 1.0])
        self.smooth = np.convolve(c, kern / kern.sum(), mode="same")

    def index(self, lo, hi):
        return int(np.searchsorted(self.x, lo)), int(np.searchsorted(self.x, hi))

    def content(self, lo, hi):
        i, j = self.index(lo, hi)
        return float(self.s0[j] - self.s0[i])

    def moments(self, centre, half):
        """Centroid, variance and content of the counts within centre +- half."""
        i, j = self.index(centre - half, centre + half)
        tot = float(self.s0[j] - self.s0[i])
        if tot <= 0:
            return np.nan, np.nan, 0.0
        mean = float(self.s1[j] - self.s1[i]) / tot
        var = max(float(self.s2[j] - self.s2[i]) / tot - mean * mean, 0.0)
        return mean, var, tot

    def peak_at(self, position, half, min_half=0.0):
        """True when the counts show a significant peak at ``position``.

        The content within ``half`` of the position must exceed the content
        of the two flanking bands of the same total width by four standard
        deviations (and hold at least 8 events). ``half`` is raised to
        ``min_half`` (a bin width) so the test never looks at a fraction of a
        bin.
        """
        half = max(half, min_half)
        inner = self.content(position - half, position + half)
        outer = self.content(position - 2 * half, position + 2 * half) - inner
        return inner >= 8.0 and inner - outer > 4.0 * np.sqrt(inner + outer)

    def first_peak(self, spacing, offset):
        """Index n of the first comb position ``offset + n spacing`` with a real peak.

        A real peak: the window of one spacing around the position holds at
        least 3 events, and the maximum of the lightly smoothed counts in it
        lies within 0.3 spacings of the position, not on the window's edge.
        """
        x = self.x
        n_first = int(np.floor((x[0] - offset) / spacing))
        n_last = int(np.ceil((x[-1] - offset) / spacing))
        for n in range(n_first, n_last + 1):
            centre = offset + n * spacing
            i, j = self.index(centre - 0.5 * spacing, centre + 0.5 * spacing)
            if j - i < 3 or self.s0[j] - self.s0[i] < 3.0:
                continue
            k = i + int(np.argmax(self.smooth[i:j]))
            if abs(x[k] - centre) <= 0.3 * spacing and i < k < j - 1:
                return n
        raise ModelError("spectrum: no peak structure found (no peak in the comb positions)")


def _start_values(x, c, edges):
    total = float(c.sum())
    spacing, offset, significance = _comb_from_fft(x, c)
    widths = np.diff(edges)
    bw = float(np.median(widths))
    # pad with empty bins so a peak at the edge of the histogram still counts
    # as a local maximum
    pad = int(np.ceil(2 * spacing / bw)) + 3
    x = np.concatenate((x[0] - bw * np.arange(pad, 0, -1), x, x[-1] + bw * np.arange(1, pad + 1)))
    c = np.concatenate((np.zeros(pad), c, np.zeros(pad)))
    h = _Counts(x, c)
    ped_index = h.first_peak(spacing, offset)
    # octave errors, tested around the strongest comb position: peaks half-way
    # (or a third of the way) to the neighbouring positions mean the spacing
    # is a multiple of the true one; no peaks at the neighbouring positions
    # but peaks one further out mean it is a fraction of it
    for _ in range(3):
        n_all = np.arange(ped_index, int(np.ceil((x[-1] - offset) / spacing)) + 1)
        centres = offset + n_all * spacing
        bounds = np.searchsorted(x, np.concatenate((centres - spacing / 2, centres + spacing / 2)))
        content = h.s0[bounds[n_all.size:]] - h.s0[bounds[:n_all.size]]
        pk = h.moments(centres[int(np.argmax(content))], spacing / 4)[0]

        def peak(position, half):
            return h.peak_at(position, half, min(bw, spacing / 4))

        def both(d, half, pk=pk):
            return peak(pk + d, half) and (pk - d < x[0] + 2 * half or peak(pk - d, half))

        def neither(d, half, pk=pk):
            return not peak(pk + d, half) and not peak(pk - d, half)

        if both(spacing / 2, spacing / 8):
            spacing /= 2
        elif both(spacing / 3, spacing / 12) and both(2 * spacing / 3, spacing / 12):
            spacing /= 3
        elif neither(spacing, spacing / 4) and (peak(pk + 2 * spacing, spacing / 4) or peak(pk - 2 * spacing, spacing / 4)):
            spacing *= 2
        else:
            break
        offset = pk
        ped_index = h.first_peak(spacing, offset)
    if spacing < 2.5 * bw:
        raise ModelError("spectrum: no peak structure found (peak spacing below 2.5 bins)")
    n_last = int(np.ceil((x[-1] - offset) / spacing))
    # refine the positions with centroids of the resolved peaks
    ns, pos, var, cont = [], [], [], []
    for n in range(ped_index, n_last + 1):
        centre = offset + n * spacing
        if centre > x[-1]:
            break
        mean, v, tot = h.moments(centre, 0.5 * spacing)
        if tot < 10.0:
            continue
        mean2, v2, tot2 = h.moments(mean, 0.5 * spacing)
        if tot2 >= 10.0:
            mean, v, tot = mean2, v2, tot2
        ns.append(n - ped_index)
        pos.append(mean)
        var.append(max(v - bw * bw / 12.0, (0.05 * spacing) ** 2))
        cont.append(tot)
    ns, pos, var, cont = map(np.asarray, (ns, pos, var, cont))
    if ns.size >= 2 and ns.max() > 0:
        wts = np.sqrt(cont)
        coef = np.polyfit(ns, pos, 1, w=wts)
        gain, pedestal = float(coef[0]), float(coef[1])
        if not (0.7 * spacing < gain < 1.3 * spacing):
            gain, pedestal = spacing, float(pos[0])
    else:
        gain, pedestal = spacing, offset + ped_index * spacing
    if ns.size and ns[0] == 0:
        pedestal_content = cont[0]
    else:
        pedestal_content = 0.0
    # widths: sigma_n^2 = sigma0^2 + n sigma1^2 from the windowed moments
    use = ns <= max(4, ns.min() + 4) if ns.size else ns
    if ns.size >= 2 and np.unique(ns[use]).size >= 2:
        coef = np.polyfit(ns[use], var[use], 1, w=np.sqrt(cont[use]))
        s1sq, s0sq = float(coef[0]), float(coef[1])
    elif ns.size:
        s0sq, s1sq = float(var[0]), 0.25 * float(var[0])
    else:
        s0sq, s1sq = (0.1 * gain) ** 2, (0.05 * gain) ** 2
    sigma0 = float(np.sqrt(max(s0sq, (0.03 * gain) ** 2, (0.3 * bw) ** 2)))
    sigma1 = float(np.sqrt(max(s1sq, (0.02 * gain) ** 2)))
    # amplitudes
    p0 = pedestal_content / total
    if p0 <= 0:
        p0 = 0.5 / total
    mean_pe = float(-np.log(min(max(p0, 1e-12), 1.0 - 1e-3)))
    mean_charge = float(np.sum(c * x) / total)
    mean_n = (mean_charge - pedestal) / gain
    crosstalk = 1.0 - mean_pe / mean_n if mean_n > 0 else 0.0
    crosstalk = float(np.clip(crosstalk, 0.02, 0.6))
    n_peaks = _peaks_needed(edges, pedestal, gain)
    return {
        "gain": gain,
        "pedestal": pedestal,
        "sigma0": sigma0,
        "sigma1": sigma1,
        "mean_pe": mean_pe,
        "crosstalk": crosstalk,
        "n_peaks": n_peaks,
        "fourier_spacing": float(spacing),
        "comb_significance": float(significance),
        "n_resolved_peaks": int(ns.size),
    }


def spectrum_start_values(charge, counts) -> dict:
    """Robust start values for the multi-peak fit.

    Parameters
    ----------
    charge : array_like
        Bin centres (any charge unit), strictly increasing.
    counts : array_like
        Events per bin, >= 0.

    Returns
    -------
    dict
        ``gain``, ``pedestal``, ``sigma0``, ``sigma1`` (charge unit),
        ``mean_pe``, ``crosstalk``, ``n_peaks`` (peaks a generalised-Poisson
        model will carry), ``fourier_spacing`` (spacing of the Fourier comb
        line after the octave check),
        ``comb_significance`` (Fourier comb line over the noise, in noise
        standard deviations) and
        ``n_resolved_peaks`` (peaks used for the position fit).

    Raises
    ------
    InputError
        Malformed arrays.
    ModelError
        No peak structure.
    """
    x, c = _fill_gaps(*_check_histogram(charge, counts))
    origin, unit = float(x[0]), float(np.median(np.diff(x)))
    xs = (x - origin) / unit
    sv = _start_values(xs, c, _edges_from_centres(xs))
    for k in ("gain", "sigma0", "sigma1", "fourier_spacing"):
        sv[k] *= unit
    sv["pedestal"] = origin + unit * sv["pedestal"]
    return sv
