"""The simulated sensor against the log-intensity change model (Lichtsteiner et al. 2008, JSSC 43(2);
Gallego et al. 2020, TPAMI survey): an event each time log I moves C from the reference, which
then moves by C."""

import numpy as np
import pytest

from snnconvert.errors import UsageError
from snnconvert.events import SensorConfig, simulate, simulate_batch
from snnconvert.events.sensor import _refractory

CLEAN = dict(mismatch=0.0, noise_hz=0.0, jitter_us=0, refractory_us=0, hot_pixels=0)


def step_image(k, contrast, dark, shape=(3, 4)):
    """A uniform image whose log intensity is exactly k*C above the dark screen."""
    i = dark * np.exp(k * contrast)
    return np.full(shape, (i - dark) / (1 - dark))


@pytest.mark.parametrize("k, contrast, dark", [(1, 0.25, 0.2), (3, 0.25, 0.2), (6, 0.25, 0.2), (2, 0.1, 0.5),
                                               (10, 0.2, 0.1)])
def test_step_of_k_contrasts_gives_k_events_each_way(k, contrast, dark):
    # model equation: a step of k*C gives k ON events at onset, k OFF events when it goes back
    cfg = SensorConfig(contrast=contrast, dark_level=dark, **CLEAN)
    s = simulate(step_image(k, contrast, dark), "flash", cfg, rng=0)
    off_start = cfg.flash_delay_us + cfg.flash_on_us
    on = s.p > 0
    assert np.all(s.t[on] < off_start) and np.all(s.t[~on] >= off_start)  # polarity = sign of the change
    per_pixel_on = np.bincount(s.y[on].astype(int) * 4 + s.x[on], minlength=12)
    per_pixel_off = np.bincount(s.y[~on].astype(int) * 4 + s.x[~on], minlength=12)
    assert per_pixel_on.tolist() == [k] * 12
    assert per_pixel_off.tolist() == [k] * 12


def test_crossing_times_on_a_linear_log_ramp():
    # log I rises linearly by dL over rise_us, so the n-th crossing of n*C is at delay + rise*n*C/dL
    cfg = SensorConfig(contrast=0.25, dark_level=0.2, rise_us=1000, **CLEAN)
    img = np.array([[1.0]])
    s = simulate(img, "flash", cfg, rng=0)
    dl = np.log(1.0 / 0.2)
    n = int(np.floor(dl / 0.25))  # hand-computed: floor(ln 5 / 0.25) = floor(6.44) = 6 crossings
    expect = np.rint(cfg.flash_delay_us + 1000 * np.arange(1, n + 1) * 0.25 / dl).astype(int)
    assert s.t[s.p > 0].tolist() == expect.tolist()


@pytest.mark.parametrize("stimulus", ["flash", "saccade"])
def test_uniform_scene_gives_only_noise(stimulus):
    # flash of a black image (nothing changes), saccade of a uniform image (no edges): no signal events
    img = np.zeros((8, 8)) if stimulus == "flash" else np.full((8, 8), 0.6)
    quiet = simulate(img, stimulus, SensorConfig(**CLEAN), rng=1)
    assert len(quiet) == 0
    cfg = SensorConfig(**{**CLEAN, "noise_hz": 50.0})
    noisy = simulate(img, stimulus, cfg, rng=1)
    dur = (cfg.flash_delay_us + cfg.flash_on_us + cfg.flash_off_us if stimulus == "flash"
           else cfg.saccade_segments * cfg.saccade_segment_us) * 1e-6
    mean = 50.0 * 64 * dur  # Poisson mean of the background events: rate x pixels x duration
    assert abs(len(noisy) - mean) < 5 * np.sqrt(mean)  # 5 sigma of a Poisson count (common practice)
    # background events come in both polarities (from memory: shot noise, Gallego et al. 2020); the
    # band 0.3-0.7 is far beyond 5 sigma of a fair coin for these counts (common practice)
    assert 0.3 < np.mean(noisy.p > 0) < 0.7


def test_saccade_events_sit_at_edges_with_both_polarities():
    img = np.zeros((16, 16))
    img[5:11, 5:11] = 1.0  # a bright square
    s = simulate(img, "saccade", SensorConfig(**CLEAN), rng=0)
    assert len(s) > 0 and np.any(s.p > 0) and np.any(s.p < 0)
    # no event deep inside the square or far outside it: only where edges pass. Hand-computed from the
    # geometry: edges at 4.5 and 10.5 move at most 2 px (saccade amplitude), so with bilinear shifts
    # pixels 7..8 see only bright and pixels <= 2 or >= 13 only dark
    inside = (s.x >= 7) & (s.x <= 8) & (s.y >= 7) & (s.y <= 8)
    far = (s.x < 3) | (s.x > 12) | (s.y < 3) | (s.y > 12)
    assert not np.any(inside) and not np.any(far)


def test_refractory_delays_but_keeps_count():
    cfg = SensorConfig(contrast=0.1, dark_level=0.2, **{**CLEAN, "refractory_us": 300})
    img = np.ones((2, 2))
    s = simulate(img, "flash", cfg, rng=0)
    n = int(np.floor(np.log(1 / 0.2) / 0.1 + 1e-9))  # model equation: floor(ln 5 / C) = 16 ON events
    for pix in range(4):
        m = (s.y.astype(int) * 2 + s.x == pix) & (s.p > 0)
        assert m.sum() == n
        assert np.all(np.diff(s.t[m]) >= 300)  # refractory period: at most one event per 300 us per pixel


def test_refractory_closed_form_matches_loop():
    rng = np.random.default_rng(3)
    g = np.sort(rng.integers(0, 5, 200))
    t = np.zeros(200, np.int64)
    for v in range(5):
        m = g == v
        t[m] = np.sort(rng.integers(0, 2000, m.sum()))
    got = _refractory(g, t, 70)
    ref = t.copy()
    for i in range(1, 200):  # t'_j = max(t_j, t'_{j-1} + r) inside a pixel
        if g[i] == g[i - 1]:
            ref[i] = max(t[i], ref[i - 1] + 70)
    assert np.array_equal(got, ref)


def test_hot_pixels_fire_often_at_few_pixels():
    cfg = SensorConfig(**{**CLEAN, "hot_pixels": 2, "hot_pixel_hz": 1000.0})
    s = simulate(np.zeros((10, 10)), "flash", cfg, rng=5)
    pix = np.unique(s.y.astype(int) * 10 + s.x)
    dur = (cfg.flash_delay_us + cfg.flash_on_us + cfg.flash_off_us) * 1e-6
    mean = 2 * 1000.0 * dur  # Poisson mean: 2 pixels x 1000 Hz x duration
    assert pix.size <= 2 and abs(len(s) - mean) < 5 * np.sqrt(mean)  # 5 sigma (common practice)


def test_seeded_and_batch_consistent():
    img = np.random.default_rng(0).random((3, 8, 8))
    cfg = SensorConfig()
    a = simulate_batch(img, "flash", cfg, rng=7, progress=False)
    b = simulate_batch(img, "flash", cfg, rng=7, progress=False)
    c = simulate_batch(img, "flash", cfg, rng=8, progress=False)
    assert np.array_equal(a[0], b[0]) and np.array_equal(a[1], b[1])
    assert not np.array_equal(a[0], c[0])
    ev, off = a
    for i in range(3):
        assert np.all(np.diff(ev["t"][off[i]:off[i + 1]]) >= 0)


def test_mismatch_spreads_counts():
    img = np.full((16, 16), 1.0)
    cfg = SensorConfig(**{**CLEAN, "mismatch": 0.2})
    s = simulate(img, "flash", cfg, rng=0)
    counts = np.bincount(s.y[s.p > 0].astype(int) * 16 + s.x[s.p > 0], minlength=256)
    assert counts.min() < counts.max()


@pytest.mark.parametrize("kw, match", [
    (dict(contrast=0.0), r"The 'contrast' parameter of SensorConfig must be a float in \[0.01, 2.0\]. Got 0.0"),
    (dict(refractory_us=-1), r"The 'refractory_us' parameter of SensorConfig must be an int >= 0. Got -1"),
    (dict(rise_us=60000), r"The 'rise_us' parameter of SensorConfig must be below flash_on_us"),
])
def test_config_validation(kw, match):
    with pytest.raises(UsageError, match=match):
        SensorConfig(**kw)


@pytest.mark.parametrize("img, stim, match", [
    (np.zeros((2, 2, 2)), "flash", "one 2-D image"),
    (np.full((2, 2), 1.5), "flash", r"values in \[0, 1\]"),
    (np.zeros((2, 2)), "wobble", "The 'stimulus' parameter of simulate must be one of 'flash', 'saccade'"),
])
def test_simulate_input_errors(img, stim, match):
    with pytest.raises(UsageError, match=match):
        simulate(img, stim)
