"""Simulated dynamic vision sensor for static images (the log-intensity change model).

Each pixel keeps a reference log intensity L_ref. While log I(t) - L_ref >= C_on it emits an ON
event and L_ref += C_on; while L_ref - log I(t) >= C_off it emits an OFF event and L_ref -= C_off
(Lichtsteiner et al. 2008; Gallego et al. 2020). So a step of k*C gives exactly k events.

    I(t)      = dark + (1 - dark) * image(t)     image in [0, 1], dark = screen black level
    log I(t)  is linear between the sample times of the stimulus, so the n-th crossing time of a
              pixel is found in closed form inside each interval (no per-event loop).
    C_on, C_off per pixel = C * (1 + mismatch * N(0, 1)), drawn once per simulated sensor (a fixed
              pattern, as in silicon), floored at C / 10.

Then, in this order: timestamp jitter (Gaussian, sigma jitter_us, rounded to whole us, floored at 0);
a refractory period that *delays* (never drops) a pixel's next event to at least refractory_us after
its previous one, so the event count still follows the equation; background noise (Poisson,
noise_hz per pixel, uniform times, random polarity); hot pixels (hot_pixels random pixels per
recording, Poisson at hot_pixel_hz each). Everything is drawn from the caller's seeded generator.

Stimuli:
    flash    dark screen for flash_delay_us, the image ramps in over rise_us, stays until
             flash_delay_us + flash_on_us, ramps out over rise_us, dark for flash_off_us.
             ON events at onset, OFF events at offset.
    saccade  the image is on screen from t = 0 (pixels adapted to it) and moves along a closed
             regular polygon of saccade_segments straight sides of saccade_amplitude pixels, each in
             saccade_segment_us, sampled saccade_steps times per side (bilinear sub-pixel shifts;
             saccade_profile "linear" moves at constant speed, "smooth" as u - sin(2 pi u) / (2 pi) of the
             side's time fraction u, i.e. speed 1 - cos(2 pi u), at rest at every corner;
             border pixels repeat outward, so a uniform image stays uniform). Events appear at the moving edges.
"""

from __future__ import annotations

from dataclasses import dataclass, fields

import numpy as np

from snnconvert.errors import UsageError, check_choice
from snnconvert.events.stream import EVENT_DTYPE, EventStream
from snnconvert.settings.data import SENSOR_KEYS, STIMULI

_CHUNK = 256  # images per vectorized pass: bounds memory, feeds the progress bar
_EPS = 1e-9  # float slack so that an exact k*C step counts k crossings, not k-1



@dataclass(frozen=True)
class SensorConfig:
    contrast: float = SENSOR_KEYS["contrast"].default
    mismatch: float = SENSOR_KEYS["mismatch"].default
    refractory_us: int = SENSOR_KEYS["refractory_us"].default
    jitter_us: int = SENSOR_KEYS["jitter_us"].default
    noise_hz: float = SENSOR_KEYS["noise_hz"].default
    hot_pixels: int = SENSOR_KEYS["hot_pixels"].default
    hot_pixel_hz: float = SENSOR_KEYS["hot_pixel_hz"].default
    dark_level: float = SENSOR_KEYS["dark_level"].default
    rise_us: int = SENSOR_KEYS["rise_us"].default
    flash_delay_us: int = SENSOR_KEYS["flash_delay_us"].default
    flash_on_us: int = SENSOR_KEYS["flash_on_us"].default
    flash_off_us: int = SENSOR_KEYS["flash_off_us"].default
    saccade_segments: int = SENSOR_KEYS["saccade_segments"].default
    saccade_segment_us: int = SENSOR_KEYS["saccade_segment_us"].default
    saccade_amplitude: float = SENSOR_KEYS["saccade_amplitude"].default
    saccade_steps: int = SENSOR_KEYS["saccade_steps"].default
    saccade_profile: str = SENSOR_KEYS["saccade_profile"].default

    def __post_init__(self):
        for f in fields(self):
            SENSOR_KEYS[f.name].check(getattr(self, f.name), f.name, "SensorConfig")
        if self.rise_us >= self.flash_on_us:
            raise UsageError(f"The 'rise_us' parameter of SensorConfig must be below flash_on_us "
                             f"({self.flash_on_us}). Got {self.rise_us} instead.")

    @classmethod
    def from_section(cls, section: dict) -> "SensorConfig":
        """The sensor keys of a recipe's [data] section (other keys are ignored)."""
        return cls(**{f.name: section[f.name] for f in fields(cls) if f.name in section})

    def as_dict(self) -> dict:
        return {f.name: getattr(self, f.name) for f in fields(self)}


def fixed_pattern(npx: int, config: SensorConfig, rng) -> tuple[np.ndarray, np.ndarray]:
    """(C_on, C_off), each (npx,): C * (1 + mismatch * N(0, 1)) per pixel, floored at C / 10."""
    c = config.contrast
    c_on = np.maximum(c * (1 + config.mismatch * rng.standard_normal(npx)), c / 10)
    c_off = np.maximum(c * (1 + config.mismatch * rng.standard_normal(npx)), c / 10)
    return c_on, c_off


def simulate(image, stimulus: str = "flash", config: SensorConfig | None = None, rng=None) -> EventStream:
    """One image (H, W) with values in [0, 1] -> the recording of one simulated sensor of size W x H."""
    image = np.asarray(image, dtype=np.float64)
    if image.ndim != 2:
        raise UsageError(f"simulate needs one 2-D image (H, W); got shape {image.shape}")
    ev, offsets = simulate_batch(image[None], stimulus, config, rng, progress=False)
    return EventStream(ev, image.shape[1], image.shape[0])


def duration_us(stimulus: str, config: SensorConfig) -> int:
    """How long one recording of the stimulus lasts: flash delay + on + off; saccade segments x segment."""
    if stimulus == "flash":
        return config.flash_delay_us + config.flash_on_us + config.flash_off_us
    return config.saccade_segments * config.saccade_segment_us


def simulate_batch(images, stimulus: str = "flash", config: SensorConfig | None = None, rng=None,
                   progress: bool = True, pattern: tuple[np.ndarray, np.ndarray] | None = None
                   ) -> tuple[np.ndarray, np.ndarray]:
    """Images (N, H, W) in [0, 1] shown to one simulated sensor, one recording each.

    Returns (events in EVENT_DTYPE, offsets (N + 1,)): recording i is events[offsets[i]:offsets[i+1]],
    each time-ordered and starting at t = 0. Vectorized over all pixels of all images; the only
    Python loop runs over the stimulus sample times. `pattern` = (C_on, C_off), each (H * W,), is a
    sensor's fixed threshold pattern (see fixed_pattern); by default it is drawn from rng first.
    """
    config = config or SensorConfig()
    check_choice(stimulus, "stimulus", "simulate", STIMULI)
    rng = rng if isinstance(rng, np.random.Generator) else np.random.default_rng(rng)
    images = np.asarray(images, dtype=np.float64)  # (N, H, W)
    if images.ndim != 3 or 0 in images.shape:
        raise UsageError(f"simulate needs images of shape (N, H, W); got {images.shape}")
    if not np.all(np.isfinite(images)) or images.min() < 0 or images.max() > 1:
        raise UsageError("simulate needs image values in [0, 1] (fraction of white)")
    n, h, w = images.shape
    npx = h * w
    c_on, c_off = pattern if pattern is not None else fixed_pattern(npx, config, rng)
    evs, counts = [], []
    from snnconvert import console
    with console.bar(total=n, desc=f"sensor ({stimulus})", unit="image", enabled=progress) as bar:
        for i0 in range(0, n, _CHUNK):
            ev, cnt = _simulate_chunk(images[i0:i0 + _CHUNK], stimulus, config, rng, c_on, c_off)
            evs.append(ev)
            counts.append(cnt)
            bar.update(cnt.size)
    offsets = np.concatenate([[0], np.cumsum(np.concatenate(counts))]).astype(np.int64)
    return np.concatenate(evs), offsets


def _simulate_chunk(images, stimulus, config, rng, c_on, c_off):
    n, h, w = images.shape
    npx = h * w
    dark = config.dark_level

    def log_i(img):  # (N, H, W) -> (N, P)
        return np.log(dark + (1 - dark) * img).reshape(n, npx)

    if stimulus == "flash":
        d, r, on = config.flash_delay_us, config.rise_us, config.flash_on_us
        end = duration_us("flash", config)
        black = np.full((n, npx), np.log(dark))
        shown = log_i(images)
        samples = [(0, black), (d, black), (d + r, shown), (d + on, shown), (d + on + r, black)]
        if end > d + on + r:
            samples.append((end, black))
        frames = iter(samples)
    else:
        k, steps = config.saccade_segments, config.saccade_steps
        ang = 2 * np.pi * np.arange(k + 1) / k
        side = config.saccade_amplitude
        radius = side / (2 * np.sin(np.pi / k))  # regular polygon with sides of `side` pixels
        vx, vy = radius * (np.cos(ang) - 1), radius * np.sin(ang)
        s = np.arange(k * steps + 1) / steps  # path parameter in segments
        seg = np.minimum(s.astype(int), k - 1)
        frac = s - seg
        if config.saccade_profile == "smooth":  # speed 1 - cos(2 pi u): at rest at every corner
            frac = frac - np.sin(2 * np.pi * frac) / (2 * np.pi)
        px = vx[seg] + (vx[seg + 1] - vx[seg]) * frac
        py = vy[seg] + (vy[seg + 1] - vy[seg]) * frac
        times = np.rint(s * config.saccade_segment_us).astype(np.int64)
        end = int(times[-1])

        from scipy import ndimage   # only the saccade stimulus needs it; the CLI loads without scipy

        def gen():
            for ti, dx, dy in zip(times, px, py):
                moved = ndimage.shift(images, (0, dy, dx), order=1, mode="nearest", prefilter=False)
                yield int(ti), log_i(np.clip(moved, 0, 1))
        frames = gen()

    t_prev, l_prev = next(frames)
    ref = l_prev.copy()  # (N, P): pixels adapted to the first sample
    parts = []
    for t_next, l_next in frames:
        dl = l_next - l_prev  # (N, P)
        n_on = np.floor(np.maximum(l_next - ref, 0) / c_on + _EPS).astype(np.int64)   # (N, P)
        n_off = np.floor(np.maximum(ref - l_next, 0) / c_off + _EPS).astype(np.int64)  # (N, P)
        for cnt, sign, cc in ((n_on, 1, c_on), (n_off, -1, c_off)):
            flat = np.flatnonzero(cnt)
            if not flat.size:
                continue
            reps = cnt.ravel()[flat]
            idx = np.repeat(flat, reps)
            kth = np.arange(idx.size) - np.repeat(np.cumsum(reps) - reps, reps) + 1  # 1..n per pixel
            level = ref.ravel()[idx] + sign * kth * cc[idx % npx]
            d = dl.ravel()[idx]
            with np.errstate(divide="ignore", invalid="ignore"):
                f = np.where(d != 0, (level - l_prev.ravel()[idx]) / d, 1.0)
            tt = t_prev + np.clip(f, 0, 1) * (t_next - t_prev)
            parts.append((idx, tt, np.full(idx.size, sign, np.int8)))
        ref = ref + n_on * c_on - n_off * c_off
        t_prev, l_prev = t_next, l_next

    if parts:
        gidx = np.concatenate([q[0] for q in parts])  # (E,) flat (image, pixel) index
        tt = np.concatenate([q[1] for q in parts])
        pp = np.concatenate([q[2] for q in parts])
    else:
        gidx, tt, pp = np.zeros(0, np.int64), np.zeros(0), np.zeros(0, np.int8)
    if config.jitter_us:
        tt = tt + config.jitter_us * rng.standard_normal(tt.size)
    tus = np.maximum(np.rint(tt), 0).astype(np.int64)
    order = np.lexsort((tus, gidx))
    gidx, tus, pp = gidx[order], tus[order], pp[order]
    if config.refractory_us and tus.size:
        tus = _refractory(gidx, tus, config.refractory_us)

    dur_s = end * 1e-6
    noise = [_poisson_events(rng, n, npx, config.noise_hz * npx * dur_s, end, pick_pixels=None)]
    if config.hot_pixels:
        hot = rng.integers(0, npx, size=(n, config.hot_pixels))  # (N, hot)
        noise.append(_poisson_events(rng, n, npx, config.hot_pixel_hz * config.hot_pixels * dur_s, end,
                                     pick_pixels=hot))
    sample = gidx // npx
    pix = gidx % npx
    for s_, p_, t_, q_ in noise:
        sample = np.concatenate([sample, s_])
        pix = np.concatenate([pix, p_])
        tus = np.concatenate([tus, t_])
        pp = np.concatenate([pp, q_])
    order = np.lexsort((tus, sample))
    ev = np.empty(order.size, EVENT_DTYPE)
    ev["t"] = tus[order]
    ev["x"] = pix[order] % w
    ev["y"] = pix[order] // w
    ev["p"] = pp[order]
    return ev, np.bincount(sample, minlength=n)


def _refractory(group: np.ndarray, t: np.ndarray, r: int) -> np.ndarray:
    """t'_j = max(t_j, t'_{j-1} + r) within each pixel group (rows sorted by group, then t).

    Closed form: t'_j = j*r + max_{i<=j}(t_i - i*r), a running maximum; adding group*BIG keeps
    the maximum from leaking across groups. j counts from the group's first row.
    """
    n = t.size
    start = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    first = np.repeat(start, np.diff(np.r_[start, n]))
    j = np.arange(n) - first
    gid = np.repeat(np.arange(start.size), np.diff(np.r_[start, n]))
    u = t - j * r
    big = int(t.max() - u.min()) + 1
    u = u + gid * big
    return np.maximum.accumulate(u) - gid * big + j * r


def _poisson_events(rng, n, npx, mean_per_sample, end, pick_pixels):
    """Poisson count per recording, uniform times in [0, end), uniform pixels (or among pick_pixels)."""
    counts = rng.poisson(mean_per_sample, size=n) if mean_per_sample > 0 else np.zeros(n, np.int64)
    total = int(counts.sum())
    sample = np.repeat(np.arange(n), counts)
    if pick_pixels is None:
        pix = rng.integers(0, npx, size=total)
    else:
        pix = pick_pixels[sample, rng.integers(0, pick_pixels.shape[1], size=total)]
    t = rng.integers(0, max(end, 1), size=total).astype(np.int64)
    p = np.where(rng.random(total) < 0.5, 1, -1).astype(np.int8)
    return sample, pix, t, p
