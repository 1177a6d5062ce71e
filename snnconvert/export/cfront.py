"""C99 reference model of the front end, generated from the manifest's `frontend.params` and frontend.npz.

Files (beside the network's C model in EXPORT_DIR/c/, written only when the export holds front-end vectors):

    snn_frontend.h          the parameters as macros, the table row types, the four stages
    snn_frontend.c          snn_fe_bins (rate counter, thresholds, hysteresis), snn_fe_windows (merge,
                            minimum duration), snn_fe_gate (subsample, threshold and gate), snn_fe_input
                            (the network's input events of a window's frame)
    snn_frontend_vectors.h  the front-end golden vectors (raw events in, every table out)
    snn_frontend_main.c     re-runs every stream from its raw events, prints PASS or the first mismatch
                            (stream, table, window, row, expected, got); `snn_frontend TRACE_DIR` also writes
                            TRACE_DIR/frontend/stream_NNNN/<table>.csv in the export's layout (compare.py)

Build: cc -std=c99 -O2 -o snn_frontend snn_frontend.c snn_frontend_main.c. Integer arithmetic only, no malloc:
static buffers sized by the golden vectors (SNN_FE_MAX_EVENTS, SNN_FE_MAX_BINS).
"""

from __future__ import annotations

import numpy as np

from snnconvert.export import frontvec as FV

FILES = ("snn_frontend.h", "snn_frontend.c", "snn_frontend_vectors.h", "snn_frontend_main.c")
MAIN_FILES = ("snn_frontend.c", "snn_frontend_main.c")
# The hysteresis test, kept as a named string so that a test can swap in a wrong rule and see the vectors catch it.
OPEN_LINE = "        state = state ? (c >= lo) : (c >= hi);   /* open: stay while c >= lo; closed: open at c >= hi */"


def _array(decl: str, values) -> str:
    from snnconvert.export.cmodel import _array as arr
    return arr(decl, values)


def _header(params, coding: str, q: int, z) -> str:
    n = len(z["t0"])
    per = [FV.rows_of(z, name, s) for s in range(n) for name in ("events", "bins")]
    max_ev = max([len(p) for p in per[0::2]] + [1])
    max_bins = max([len(p) for p in per[1::2]] + [1])
    pix = params.channels * params.size * params.size
    m = ["/* snnconvert C reference model of the front end: generated from manifest.json (frontend.params). */",
         "#ifndef SNN_FRONTEND_H", "#define SNN_FRONTEND_H", "", "#include <stdint.h>", "",
         f"#define SNN_FE_BIN_US {params.bin_us}",
         f"#define SNN_FE_RELATIVE {int(params.relative)}",
         f"#define SNN_FE_UPPER_16 {params.upper_16}", f"#define SNN_FE_LOWER_16 {params.lower_16}",
         f"#define SNN_FE_UPPER_COUNT {params.upper_count}", f"#define SNN_FE_LOWER_COUNT {params.lower_count}",
         f"#define SNN_FE_B {params.background_bins}   /* background bins */",
         f"#define SNN_FE_MIN_BINS {params.min_bins}", f"#define SNN_FE_MERGE_BINS {params.merge_bins}",
         f"#define SNN_FE_WIDTH {params.width}", f"#define SNN_FE_HEIGHT {params.height}",
         f"#define SNN_FE_SIZE {params.size}", f"#define SNN_FE_CHANNELS {params.channels}",
         f"#define SNN_FE_BINARY {int(params.mode == 'binary')}   /* 0: count or polarity mode */",
         f"#define SNN_FE_POLARITY {int(params.mode == 'polarity')}",
         f"#define SNN_FE_THRESHOLD {params.threshold}", f"#define SNN_FE_MAX_COUNT {params.max_count}",
         f"#define SNN_FE_PIXELS {pix}",
         f"#define SNN_FE_TTFS {int(coding == 'ttfs')}   /* the network's coding of input events */",
         f"#define SNN_FE_Q {q}   /* largest input payload */",
         f"#define SNN_FE_MAX_EVENTS {max_ev}   /* buffer sizes: the largest golden stream */",
         f"#define SNN_FE_MAX_BINS {max_bins}", "",
         "typedef struct snn_raw { int64_t t; int32_t x, y, p; } snn_raw_t;",
         "typedef struct snn_bin { int64_t t_start; int32_t count, hi, lo, open; } snn_bin_t;",
         "typedef struct snn_window { int32_t bin_start, bin_end; int64_t t_start, t_end; } snn_window_t;",
         "typedef struct snn_gated { int64_t t; int32_t x, y, c, payload; } snn_gated_t;",
         "typedef struct snn_input { int32_t addr, t, payload; } snn_input_t;", "",
         "/* Rate counter and hysteresis over the n time-ordered events: fills bins[0..], returns the bin count",
         " * (-1: more than SNN_FE_MAX_BINS). t0 = the first event. */",
         "int32_t snn_fe_bins(const snn_raw_t *ev, int32_t n, int64_t *t0, snn_bin_t *bins);",
         "/* Windows after merge and minimum duration; returns their count. */",
         "int32_t snn_fe_windows(const snn_bin_t *bins, int32_t n_bins, int64_t t0, snn_window_t *w);",
         "/* One window's gated input events in emission order; returns their count (at most SNN_FE_PIXELS). */",
         "int32_t snn_fe_gate(const snn_raw_t *ev, int32_t n, const snn_window_t *w, snn_gated_t *out);",
         "/* The network's input events of the frame of n gated events, in golden order; returns their count. */",
         "int32_t snn_fe_input(const snn_gated_t *g, int32_t n, snn_input_t *out);", "", "#endif", ""]
    return "\n".join(m)


_SOURCE = r"""/* snnconvert C reference model of the front end (rules: manifest.json, frontend.rules). */
#include "snn_frontend.h"

int32_t snn_fe_bins(const snn_raw_t *ev, int32_t n, int64_t *t0, snn_bin_t *bins)
{
    static int64_t fifo[SNN_FE_B];   /* the last B closed-bin counts, 0 before t0 */
    int64_t total = 0, n_bins, k;
    int32_t i = 0, pos = 0, state = 0, j;
    if (n <= 0)
        return 0;
    for (j = 0; j < SNN_FE_B; j++)
        fifo[j] = 0;
    *t0 = ev[0].t;
    n_bins = (ev[n - 1].t - *t0) / SNN_FE_BIN_US + 1;
    if (n_bins > SNN_FE_MAX_BINS)
        return -1;
    for (k = 0; k < n_bins; k++) {
        const int64_t end = *t0 + (k + 1) * SNN_FE_BIN_US;
        int64_t c = 0, hi, lo;
        while (i < n && ev[i].t < end) {   /* bin k: t0 + k*bin_us <= t < t0 + (k+1)*bin_us */
            c++;
            i++;
        }
#if SNN_FE_RELATIVE
        {
            const int64_t s = total > SNN_FE_B ? total : SNN_FE_B;   /* S_k = max(sum, B) */
            const int64_t den = (int64_t)16 * SNN_FE_B;
            hi = (int64_t)SNN_FE_UPPER_16 * s / den + 1;
            lo = ((int64_t)SNN_FE_LOWER_16 * s + den - 1) / den;   /* ceil, both operands >= 0 */
        }
#else
        hi = SNN_FE_UPPER_COUNT;
        lo = SNN_FE_LOWER_COUNT;
#endif
        if (lo > hi)
            lo = hi;
%(open_line)s
        if (!state) {   /* a closed bin enters the background */
            total += c - fifo[pos];
            fifo[pos] = c;
            pos = pos + 1 < SNN_FE_B ? pos + 1 : 0;
        }
        bins[k].t_start = *t0 + k * SNN_FE_BIN_US;
        bins[k].count = (int32_t)c;
        bins[k].hi = (int32_t)hi;
        bins[k].lo = (int32_t)lo;
        bins[k].open = state;
    }
    return (int32_t)n_bins;
}

int32_t snn_fe_windows(const snn_bin_t *bins, int32_t n_bins, int64_t t0, snn_window_t *w)
{
    int32_t k, a = -1, n = 0, m = 0;
    for (k = 0; k <= n_bins; k++) {   /* runs of open bins; a run open at the last bin ends with it */
        const int32_t open = k < n_bins && bins[k].open;
        if (open && a < 0)
            a = k;
        if (!open && a >= 0) {
            if (n > 0 && a - w[n - 1].bin_end < SNN_FE_MERGE_BINS)
                w[n - 1].bin_end = k;   /* merge: a gap of fewer than merge_bins bins */
            else {
                w[n].bin_start = a;
                w[n].bin_end = k;
                n++;
            }
            a = -1;
        }
    }
    for (k = 0; k < n; k++) {   /* minimum duration, after merging */
        if (w[k].bin_end - w[k].bin_start < SNN_FE_MIN_BINS)
            continue;
        w[m].bin_start = w[k].bin_start;
        w[m].bin_end = w[k].bin_end;
        w[m].t_start = t0 + (int64_t)w[k].bin_start * SNN_FE_BIN_US;
        w[m].t_end = t0 + (int64_t)w[k].bin_end * SNN_FE_BIN_US;
        m++;
    }
    return m;
}

static int32_t snn_fe_pixel(const snn_raw_t *e)
{
    const int32_t j = (int32_t)((int64_t)e->x * SNN_FE_SIZE / SNN_FE_WIDTH);    /* floor: x, size >= 0 */
    const int32_t i = (int32_t)((int64_t)e->y * SNN_FE_SIZE / SNN_FE_HEIGHT);
    const int32_t c = SNN_FE_POLARITY && e->p < 0 ? 1 : 0;
    return (c * SNN_FE_SIZE + i) * SNN_FE_SIZE + j;
}

int32_t snn_fe_gate(const snn_raw_t *ev, int32_t n, const snn_window_t *w, snn_gated_t *out)
{
    static int32_t count[SNN_FE_PIXELS];
    int32_t i, k, m = 0;
    for (k = 0; k < SNN_FE_PIXELS; k++)
        count[k] = 0;
    for (i = 0; i < n; i++) {
        int32_t px;
        if (ev[i].t < w->t_start || ev[i].t >= w->t_end)
            continue;
        px = snn_fe_pixel(ev + i);
        count[px]++;
#if SNN_FE_BINARY
        if (count[px] == SNN_FE_THRESHOLD) {   /* the threshold-th event emits; later ones are dropped */
            out[m].t = ev[i].t;
            out[m].c = px / (SNN_FE_SIZE * SNN_FE_SIZE);
            out[m].y = px / SNN_FE_SIZE %% SNN_FE_SIZE;
            out[m].x = px %% SNN_FE_SIZE;
            out[m].payload = 1;
            m++;
        }
#endif
    }
#if !SNN_FE_BINARY
    for (k = 0; k < SNN_FE_PIXELS; k++) {   /* at the window end, by address, the count clipped */
        if (count[k] == 0)
            continue;
        out[m].t = w->t_end;
        out[m].c = k / (SNN_FE_SIZE * SNN_FE_SIZE);
        out[m].y = k / SNN_FE_SIZE %% SNN_FE_SIZE;
        out[m].x = k %% SNN_FE_SIZE;
        out[m].payload = count[k] < SNN_FE_MAX_COUNT ? count[k] : SNN_FE_MAX_COUNT;
        m++;
    }
#endif
    return m;
}

int32_t snn_fe_input(const snn_gated_t *g, int32_t n, snn_input_t *out)
{
    static int32_t frame[SNN_FE_PIXELS];
    int32_t k, m = 0;
    for (k = 0; k < SNN_FE_PIXELS; k++)
        frame[k] = 0;
    for (k = 0; k < n; k++)
        frame[(g[k].c * SNN_FE_SIZE + g[k].y) * SNN_FE_SIZE + g[k].x] = g[k].payload;
#if SNN_FE_TTFS
    {
        int32_t t;
        for (t = 0; t < SNN_FE_Q; t++)   /* spike at step t = q - a, by step then address */
            for (k = 0; k < SNN_FE_PIXELS; k++)
                if (frame[k] > 0 && SNN_FE_Q - frame[k] == t) {
                    out[m].addr = k; out[m].t = t; out[m].payload = frame[k]; m++;
                }
    }
#else
    for (k = 0; k < SNN_FE_PIXELS; k++)   /* by address, t = 0 */
        if (frame[k] > 0) {
            out[m].addr = k; out[m].t = 0; out[m].payload = frame[k]; m++;
        }
#endif
    return m;
}
"""


def _vectors(z) -> str:
    n = len(z["t0"])
    out = [f"/* snnconvert front-end golden vectors ({n} streams), from frontend.npz; rows as in the CSV files. */",
           f"#define SNN_FE_STREAMS {n}", ""]
    for name in FV.TABLES:
        a = np.asarray(z[name], np.int64)
        starts = np.searchsorted(a[:, 0], np.arange(n + 1)) if len(a) else np.zeros(n + 1, np.int64)
        out.append(f"#define SNN_FE_{name.upper()}_COLS {len(FV.COLUMNS[name])}")
        out.append(_array(f"static const int64_t SNN_FE_{name.upper()}", a[:, 1:]))
        out.append(_array(f"static const int32_t SNN_FE_{name.upper()}_START", starts))
    out.append(_array("static const int64_t SNN_FE_T0", z["t0"]))
    return "\n".join(out)


_MAIN = r"""/* snnconvert C reference model of the front end: re-run every golden stream from its raw events.
 * Usage: snn_frontend [TRACE_DIR]   (TRACE_DIR: also write TRACE_DIR/frontend/stream_NNNN/<table>.csv) */
#define _POSIX_C_SOURCE 200809L
#include <stdio.h>
#include <string.h>
#include <sys/stat.h>
#include <sys/types.h>
#include "snn_frontend.h"
#include "snn_frontend_vectors.h"

%(names)s

static void snn_fe_fmt(char *buf, size_t size, const char *const *cols, int32_t ncols, const int64_t *row)
{
    size_t used = 0;
    int32_t k;
    if (row == NULL) {
        snprintf(buf, size, "nothing");
        return;
    }
    used += (size_t)snprintf(buf, size, "(");
    for (k = 0; k < ncols && used < size; k++) {
        if (strcmp(cols[k], "window") == 0)
            continue;
        used += (size_t)snprintf(buf + used, size - used, "%%s%%s %%lld", used > 1 ? ", " : "", cols[k],
                                 (long long)row[k]);
    }
    if (used < size)
        snprintf(buf + used, size - used, ")");
}

/* First differing row of a stream's table: stream, table, window (tables with a window column) and row. */
static int snn_fe_check(int32_t s, const char *table, const char *what, const char *const *cols, int32_t ncols,
                        const int64_t *exp, int32_t n_exp, const int64_t *got, int32_t n_got)
{
    char a[256], b[256];
    int32_t k, j;
    for (k = 0; k < n_exp || k < n_got; k++) {
        const int64_t *e = k < n_exp ? exp + (size_t)ncols * k : NULL;
        const int64_t *g = k < n_got ? got + (size_t)ncols * k : NULL;
        const int64_t *side = e != NULL ? e : g;
        int32_t pos = k;
        if (e != NULL && g != NULL && memcmp(e, g, sizeof(int64_t) * (size_t)ncols) == 0)
            continue;
        snn_fe_fmt(a, sizeof a, cols, ncols, e);
        snn_fe_fmt(b, sizeof b, cols, ncols, g);
        if (strcmp(cols[0], "window") == 0) {
            const int64_t *all = e != NULL ? exp : got;
            for (pos = 0, j = 0; j < k; j++)
                pos += all[(size_t)ncols * j] == side[0];
            if (strcmp(table, "windows") == 0)
                printf("FAIL: first mismatch: stream %%d, front end %%s, window %%lld: expected %%s, got %%s\n",
                       (int)s, table, (long long)side[0], a, b);
            else
                printf("FAIL: first mismatch: stream %%d, front end %%s, window %%lld, %%s %%d: expected %%s, got %%s\n",
                       (int)s, table, (long long)side[0], what, (int)pos, a, b);
        } else {
            printf("FAIL: first mismatch: stream %%d, front end %%s, %%s %%d: expected %%s, got %%s\n",
                   (int)s, table, what, (int)pos, a, b);
        }
        return 1;
    }
    return 0;
}

static int snn_fe_write(const char *dir, int32_t s, const char *table, const char *const *cols, int32_t ncols,
                        const int64_t *rows, int32_t n)
{
    char path[4096];
    int32_t k, j;
    FILE *f;
    snprintf(path, sizeof path, "%%s/frontend", dir);
    mkdir(path, 0777);
    snprintf(path, sizeof path, "%%s/frontend/stream_%%04d", dir, (int)s);
    mkdir(path, 0777);
    snprintf(path, sizeof path, "%%s/frontend/stream_%%04d/%%s.csv", dir, (int)s, table);
    f = fopen(path, "w");
    if (f == NULL)
        return 1;
    for (j = 0; j < ncols; j++)
        fprintf(f, "%%s%%s", j ? "," : "", cols[j]);
    fprintf(f, "\n");
    for (k = 0; k < n; k++) {
        for (j = 0; j < ncols; j++)
            fprintf(f, "%%s%%lld", j ? "," : "", (long long)rows[(size_t)ncols * k + j]);
        fprintf(f, "\n");
    }
    return fclose(f) != 0;
}

static snn_raw_t ev[SNN_FE_MAX_EVENTS];
static snn_bin_t bins[SNN_FE_MAX_BINS];
static snn_window_t win[SNN_FE_MAX_BINS];
static snn_gated_t gated[SNN_FE_PIXELS];
static snn_input_t inp[SNN_FE_PIXELS];
static int64_t t_bins[SNN_FE_MAX_BINS * SNN_FE_BINS_COLS];
static int64_t t_win[SNN_FE_MAX_BINS * SNN_FE_WINDOWS_COLS];
static int64_t t_gated[(size_t)SNN_FE_MAX_EVENTS * SNN_FE_GATED_COLS];
static int64_t t_input[(size_t)SNN_FE_MAX_EVENTS * SNN_FE_INPUT_COLS];

int main(int argc, char **argv)
{
    const char *dir = argc > 1 ? argv[1] : NULL;
    int32_t s, k, failed = 0;
    if (dir != NULL)
        mkdir(dir, 0777);
    for (s = 0; s < SNN_FE_STREAMS; s++) {
        const int32_t n = SNN_FE_EVENTS_START[s + 1] - SNN_FE_EVENTS_START[s];
        const int64_t *raw = SNN_FE_EVENTS + (size_t)SNN_FE_EVENTS_COLS * SNN_FE_EVENTS_START[s];
        int64_t t0 = 0;
        int32_t n_bins, n_win, n_g = 0, n_i = 0, w;
        for (k = 0; k < n; k++) {
            ev[k].t = raw[4 * k]; ev[k].x = (int32_t)raw[4 * k + 1]; ev[k].y = (int32_t)raw[4 * k + 2];
            ev[k].p = (int32_t)raw[4 * k + 3];
        }
        n_bins = snn_fe_bins(ev, n, &t0, bins);
        if (n_bins < 0) {
            printf("error: stream %%d has more bins than SNN_FE_MAX_BINS\n", (int)s);
            return 2;
        }
        for (k = 0; k < n_bins; k++) {
            int64_t *r = t_bins + SNN_FE_BINS_COLS * k;
            r[0] = k; r[1] = bins[k].t_start; r[2] = bins[k].count; r[3] = bins[k].hi; r[4] = bins[k].lo;
            r[5] = bins[k].open;
        }
        n_win = snn_fe_windows(bins, n_bins, t0, win);
        for (w = 0; w < n_win; w++) {
            int64_t *r = t_win + SNN_FE_WINDOWS_COLS * w;
            int32_t m = snn_fe_gate(ev, n, win + w, gated), mi = snn_fe_input(gated, m, inp);
            r[0] = w; r[1] = win[w].bin_start; r[2] = win[w].bin_end; r[3] = win[w].t_start; r[4] = win[w].t_end;
            for (k = 0; k < m; k++, n_g++) {
                int64_t *g = t_gated + (size_t)SNN_FE_GATED_COLS * n_g;
                g[0] = w; g[1] = gated[k].t; g[2] = gated[k].x; g[3] = gated[k].y; g[4] = gated[k].c;
                g[5] = gated[k].payload;
            }
            for (k = 0; k < mi; k++, n_i++) {
                int64_t *g = t_input + (size_t)SNN_FE_INPUT_COLS * n_i;
                g[0] = w; g[1] = inp[k].addr; g[2] = inp[k].t; g[3] = inp[k].payload;
            }
        }
        if (!failed)
%(checks)s
        if (dir != NULL && (
%(writes)s)) {
            printf("error: cannot write the trace folder %%s\n", dir);
            return 2;
        }
    }
    if (!failed)
        printf("PASS: %%d front-end streams match bit for bit\n", (int)SNN_FE_STREAMS);
    return failed;
}
"""

_GOT = {"bins": ("t_bins", "n_bins", "bin"), "windows": ("t_win", "n_win", "window"),
        "gated": ("t_gated", "n_g", "event"), "input": ("t_input", "n_i", "input event")}


def _main() -> str:
    names = "\n".join(f"static const char *const SNN_FE_{t.upper()}_NAMES[] = {{"
                      + ", ".join(f'"{c}"' for c in FV.COLUMNS[t]) + "};" for t in FV.CHECKED)
    checks, writes = [], []
    for t in FV.CHECKED:
        arr, cnt, what = _GOT[t]
        T = t.upper()
        exp = (f"SNN_FE_{T} + (size_t)SNN_FE_{T}_COLS * SNN_FE_{T}_START[s], "
               f"SNN_FE_{T}_START[s + 1] - SNN_FE_{T}_START[s]")
        checks.append(f'snn_fe_check(s, "{t}", "{what}", SNN_FE_{T}_NAMES, SNN_FE_{T}_COLS, {exp}, {arr}, {cnt})')
        writes.append(f'snn_fe_write(dir, s, "{t}", SNN_FE_{T}_NAMES, SNN_FE_{T}_COLS, {arr}, {cnt})')
    check = "            failed = " + "\n                || ".join(checks) + ";"
    write = "                " + "\n                || ".join(writes)
    return _MAIN % {"names": names, "checks": check, "writes": write}


def c_sources(man: dict, z, name: str) -> dict[str, str]:
    """{file name: C source} of the front end of an export (manifest `man`, frontend.npz arrays `z`)."""
    fe = man["frontend"]
    params = FV.params_from_manifest(fe["params"], name)
    q = int(man["input"]["q"])
    return {"snn_frontend.h": _header(params, man["coding"], q, z),
            "snn_frontend.c": _SOURCE % {"open_line": OPEN_LINE},
            "snn_frontend_vectors.h": _vectors(z), "snn_frontend_main.c": _main()}
