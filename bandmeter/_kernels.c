/*
 * Compiled inner loops of bandmeter (optional extension module ``bandmeter._kernels``).
 *
 * tile_maxima and count_levels do exactly what a NumPy path in the package does, with the
 * same floating-point operations in the same order, so the results are the same to the last
 * bit; time_weighting runs the exponential averagers as the recursion itself (the bits of
 * scipy.signal.lfilter), which the NumPy path's block formulation matches to 1e-13
 * relative; sos_bands runs band filters in scipy.signal.sosfilt's arithmetic (its bits),
 * which the NumPy path's block kernel matches to 4.5e-14 of a band's RMS. The package uses
 * the NumPy paths when this module is not built, and the tests compare the two. Arrays are
 * passed through the buffer protocol (C-contiguous float64, int64 where stated); the Python
 * caller checks shapes and dtypes, this file checks every index against the buffer sizes.
 *
 * Built with -ffp-contract=off: no fused multiply-adds, so that every operation rounds as
 * NumPy's does.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <float.h>
#include <math.h>
#include <string.h>

#if defined(__SSE2__)
#include <emmintrin.h>
#endif
#if defined(__x86_64__) && (defined(__GNUC__) || defined(__clang__))
#include <immintrin.h>
#define HAVE_AVX2_DISPATCH 1
#endif

#define TILE 16

/*
 * Tile maxima of |x| and |D2| for the true-peak meter (bandmeter.peak._tile_pass).
 *
 * For tiles q = 0 .. n_tiles - 1 of 16 samples from x[start]:
 *   tiles_abs[q] = max |x[i]|,  tiles_d2[q] = max |(x[i-1] - 2 x[i]) + x[i+1]|
 * over i = start + 16 q .. start + 16 q + 15, and for the inner tiles q = 1 .. n_tiles - 2
 *   near[q - 1] = max(tiles_abs[q], |x[start + 16 q - 1]|, |x[start + 16 q + 16]|).
 * The second difference is NumPy's (x[i-1] + (-2 x[i])) + x[i+1] (a + (-b) is a - b in IEEE
 * arithmetic, and 2 x[i] is exact). Returns 1 when every |D2| is finite (so every sample of
 * x[start - 1 .. start + 16 n_tiles] is), else 0: the caller then takes the NumPy path, which
 * propagates NaN as it always did.
 */
static int tile_maxima_loop(const double *x, Py_ssize_t start, Py_ssize_t n_tiles,
                            double *tiles_abs, double *tiles_d2, double *near)
{
    int finite = 1;
#if defined(__SSE2__)
    const __m128d sign = _mm_set1_pd(-0.0), two = _mm_set1_pd(2.0), zero = _mm_setzero_pd();
    __m128d poison = zero; /* d * 0 is NaN for an infinite or NaN d */
    for (Py_ssize_t q = 0; q < n_tiles; q++) {
        const double *p = x + start + TILE * q;
        __m128d m0 = zero, m1 = zero;
        for (int i = 0; i < TILE; i += 2) {
            __m128d v = _mm_loadu_pd(p + i);
            __m128d left = _mm_loadu_pd(p + i - 1), right = _mm_loadu_pd(p + i + 1);
            __m128d d = _mm_add_pd(_mm_sub_pd(left, _mm_mul_pd(two, v)), right);
            d = _mm_andnot_pd(sign, d);
            m0 = _mm_max_pd(_mm_andnot_pd(sign, v), m0);
            m1 = _mm_max_pd(d, m1);
            poison = _mm_add_pd(poison, _mm_mul_pd(d, zero));
        }
        _mm_store_sd(tiles_abs + q, _mm_max_sd(m0, _mm_unpackhi_pd(m0, m0)));
        _mm_store_sd(tiles_d2 + q, _mm_max_sd(m1, _mm_unpackhi_pd(m1, m1)));
    }
    double lanes[2];
    _mm_storeu_pd(lanes, poison);
    finite = lanes[0] == 0.0 && lanes[1] == 0.0;
#else
    double poison = 0.0;
    for (Py_ssize_t q = 0; q < n_tiles; q++) {
        const double *p = x + start + TILE * q;
        double m0 = 0.0, m1 = 0.0;
        for (int i = 0; i < TILE; i++) {
            double a = fabs(p[i]);
            double d = fabs((p[i - 1] - 2.0 * p[i]) + p[i + 1]);
            m0 = a > m0 ? a : m0;
            m1 = d > m1 ? d : m1;
            poison += d * 0.0;
        }
        tiles_abs[q] = m0;
        tiles_d2[q] = m1;
    }
    finite = poison == 0.0;
#endif
    if (!finite)
        return 0;
    for (Py_ssize_t q = 1; q < n_tiles - 1; q++) {
        const double *p = x + start + TILE * q;
        double m = tiles_abs[q], before = fabs(p[-1]), after = fabs(p[TILE]);
        m = before > m ? before : m;
        near[q - 1] = after > m ? after : m;
    }
    return 1;
}

/* One array argument: the object, what it must hold ('d' float64, 'q' int64), whether it is
 * written, its name for errors, and its buffer once acquired (obj None: an absent optional
 * argument, view.buf NULL). */
typedef struct {
    PyObject *obj;
    char kind;
    int writable;
    const char *name;
    Py_buffer view;
} ArrayArg;

#define ARRAY_ARG(k, w, n) {.obj = NULL, .kind = (k), .writable = (w), .name = (n)}

static int acquire_one(ArrayArg *arg)
{
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (arg->writable ? PyBUF_WRITABLE : 0);
    arg->view.buf = NULL;
    arg->view.len = 0;
    if (arg->obj == Py_None)
        return 0;
    if (PyObject_GetBuffer(arg->obj, &arg->view, flags) < 0)
        return -1;
    const char *f = arg->view.format;
    int ok = arg->view.itemsize == 8 && f != NULL
             && (arg->kind == 'd' ? strcmp(f, "d") == 0
                                  : (strcmp(f, "l") == 0 || strcmp(f, "q") == 0));
    if (!ok) {
        PyErr_Format(PyExc_TypeError, "%s must hold %s values", arg->name,
                     arg->kind == 'd' ? "float64" : "int64");
        PyBuffer_Release(&arg->view);
        arg->view.buf = NULL;
        return -1;
    }
    return 0;
}

static void release_arrays(ArrayArg *args, int count)
{
    for (int i = 0; i < count; i++) {
        if (args[i].view.buf != NULL || args[i].view.obj != NULL)
            PyBuffer_Release(&args[i].view);
        args[i].view.buf = NULL;
        args[i].view.obj = NULL;
    }
}

/* Acquire every array of args (0), or none (-1, with the error set). */
static int acquire_arrays(ArrayArg *args, int count)
{
    for (int i = 0; i < count; i++) {
        args[i].view.obj = NULL;
        args[i].view.buf = NULL;
    }
    for (int i = 0; i < count; i++) {
        if (acquire_one(&args[i]) < 0) {
            release_arrays(args, i);
            return -1;
        }
    }
    return 0;
}

/* Number of 8-byte values in an acquired array (0 when absent). */
static Py_ssize_t values(const ArrayArg *arg)
{
    return arg->view.len / 8;
}

static PyObject *tile_maxima(PyObject *self, PyObject *args)
{
    ArrayArg a[4] = {ARRAY_ARG('d', 0, "x"), ARRAY_ARG('d', 1, "tiles_abs"),
                     ARRAY_ARG('d', 1, "tiles_d2"), ARRAY_ARG('d', 1, "near")};
    Py_ssize_t start, n_tiles;
    (void)self;
    if (!PyArg_ParseTuple(args, "OnnOOO", &a[0].obj, &start, &n_tiles, &a[1].obj, &a[2].obj,
                          &a[3].obj))
        return NULL;
    if (acquire_arrays(a, 4) < 0)
        return NULL;
    Py_ssize_t n_x = values(&a[0]);
    int result = -1;
    /* x[start - 1 .. start + 16 n_tiles] is read; written without overflow */
    if (n_tiles < 2 || start < 1 || start > n_x - 1 || n_tiles > (n_x - 1 - start) / TILE
        || values(&a[1]) < n_tiles || values(&a[2]) < n_tiles || values(&a[3]) < n_tiles - 2) {
        PyErr_SetString(PyExc_ValueError, "tile_maxima: arrays too short for the tiles");
    } else {
        Py_BEGIN_ALLOW_THREADS
        result = tile_maxima_loop((const double *)a[0].view.buf, start, n_tiles,
                                  (double *)a[1].view.buf, (double *)a[2].view.buf,
                                  (double *)a[3].view.buf);
        Py_END_ALLOW_THREADS
    }
    release_arrays(a, 4);
    if (result < 0)
        return NULL;
    return PyBool_FromLong(result);
}

/*
 * Level histogram counting (bandmeter.engine's _count_levels, LevelHistogram.add_levels).
 *
 * For each level L (dB): p = (L - low_db) / resolution_db (the same two operations), bin
 * b = floor(p) limited to -1 .. nbins, and counts[b + 1] += 1: index 0 is the underflow bin
 * (also -inf, digital silence), index nbins + 1 the overflow bin. floor(p) is the truncation
 * of p for 0 <= p < nbins; p < 0 gives -1 and p >= nbins gives nbins (the limits), so no
 * rounding is involved. Runs of equal bins (the F level is smooth) are added at once.
 * Returns the lowest and highest index counted, or lowest = -1 when a level is NaN (the
 * counts are then incomplete: the caller raises).
 */
static void count_levels_loop(const double *levels, Py_ssize_t n, double low_db,
                              double resolution_db, Py_ssize_t nbins, long long *counts,
                              Py_ssize_t *lowest, Py_ssize_t *highest)
{
    Py_ssize_t current = -1, run = 0, lo = nbins + 1, hi = 0;
    const double top = (double)nbins;
    for (Py_ssize_t i = 0; i < n; i++) {
        double p = (levels[i] - low_db) / resolution_db;
        Py_ssize_t index;
        if (p >= 0.0)
            index = p < top ? (Py_ssize_t)p + 1 : nbins + 1;
        else if (p < 0.0)
            index = 0;
        else { /* NaN */
            if (run)
                counts[current] += run;
            *lowest = -1;
            *highest = -1;
            return;
        }
        if (index == current) {
            run++;
            continue;
        }
        if (run)
            counts[current] += run;
        current = index;
        run = 1;
        if (index < lo)
            lo = index;
        if (index > hi)
            hi = index;
    }
    if (run)
        counts[current] += run;
    *lowest = lo;
    *highest = hi;
}

static PyObject *count_levels(PyObject *self, PyObject *args)
{
    ArrayArg a[2] = {ARRAY_ARG('d', 0, "levels"), ARRAY_ARG('q', 1, "counts")};
    double low_db, resolution_db;
    Py_ssize_t nbins;
    (void)self;
    if (!PyArg_ParseTuple(args, "OddnO", &a[0].obj, &low_db, &resolution_db, &nbins,
                          &a[1].obj))
        return NULL;
    if (acquire_arrays(a, 2) < 0)
        return NULL;
    Py_ssize_t lowest = 0, highest = 0;
    int ok = 0;
    if (nbins < 1 || nbins > values(&a[1]) - 2 || !(resolution_db > 0.0)) {
        PyErr_SetString(PyExc_ValueError, "count_levels: counts shorter than nbins + 2");
    } else if (values(&a[0]) == 0) {
        PyErr_SetString(PyExc_ValueError, "count_levels: no levels");
    } else {
        Py_BEGIN_ALLOW_THREADS
        count_levels_loop((const double *)a[0].view.buf, values(&a[0]), low_db,
                          resolution_db, nbins, (long long *)a[1].view.buf, &lowest,
                          &highest);
        Py_END_ALLOW_THREADS
        ok = 1;
    }
    release_arrays(a, 2);
    if (!ok)
        return NULL;
    if (lowest < 0)
        Py_RETURN_NONE;
    return Py_BuildValue("nn", lowest, highest);
}

/*
 * Exponential time weightings of one squared signal, with per-segment extremes
 * (bandmeter.timeweight.TimeWeightingSet.extremes).
 *
 * Up to MAX_CHAINS averagers y_j[n] = b_j x[n] + a_j y_j[n-1], each exactly as
 * scipy.signal.lfilter([b], [1, -a], x, zi=[a y]) computes it (one product of each kind and
 * their sum, rounded in that order). A chain may be followed by a peak hold
 * held[n] = max(y_j[n], d held[n-1]). The hold is kept as the value p it last took from the
 * averager and its age m in samples, held[n] = p d^m with d^m from the table decay[m] (the
 * NumPy detector's own table of exp(m ln d)), so a long decay is rounded once per value, not
 * once per sample; past the table's end p is re-based (p d^(size-1), one rounding per
 * table length). For each segment [edges[s], edges[s+1]) the largest and smallest value of
 * each chain's output (the held value where there is a hold) go to
 * maxima[j * n_segments + s] and minima[...]; a chain's per-sample output is stored when
 * out[j] is given. Held values below 1e-200 are flushed to 0 at the end of every segment,
 * as the NumPy detector does (no slow subnormal state); the averagers' states are the
 * caller's (it flushes them between blocks).
 *
 * Returns 0, or -1 (nothing stored in states and held) on a negative, infinite or NaN
 * sample.
 */
#define MAX_CHAINS 3
#define HOLD_FLOOR 1e-200

typedef struct {
    const double *decay; /* decay[m] = d^m, decay[0] = 1 */
    Py_ssize_t size;     /* entries in decay (>= 2) */
} HoldTable;

/* One sample of a hold: the held value, given the averager's output w. */
static inline double hold_step(double w, double *p, Py_ssize_t *m, const HoldTable *t)
{
    Py_ssize_t age = *m + 1;
    double base = *p;
    if (age == t->size) { /* re-base at the end of the table */
        base = base * t->decay[t->size - 1];
        age = 1;
    }
    double decayed = base * t->decay[age];
    int rise = w > decayed;
    *p = rise ? w : base;
    *m = rise ? 0 : age;
    return rise ? w : decayed;
}

static int time_weighting_loop(const double *x, const long long *edges, Py_ssize_t n_segments,
                               int k, const double *a, const double *b, const int *hold,
                               const HoldTable *table, double *state, double *held,
                               double **out, double *maxima, double *minima)
{
    double y[MAX_CHAINS], p[MAX_CHAINS];
    Py_ssize_t age[MAX_CHAINS];
    for (int j = 0; j < k; j++) {
        y[j] = state[j];
        p[j] = held[j];
        age[j] = 0;
    }
    for (Py_ssize_t s = 0; s < n_segments; s++) {
        double top[MAX_CHAINS], bottom[MAX_CHAINS], last[MAX_CHAINS];
        for (int j = 0; j < k; j++) {
            top[j] = -HUGE_VAL;
            bottom[j] = HUGE_VAL;
            last[j] = 0.0;
        }
        int bad = 0;
        for (long long i = edges[s]; i < edges[s + 1]; i++) {
            double v = x[i];
            bad |= !(v >= 0.0 && v <= DBL_MAX);
            for (int j = 0; j < k; j++) {
                double w = b[j] * v + a[j] * y[j];
                y[j] = w;
                if (hold[j])
                    w = hold_step(w, &p[j], &age[j], table);
                if (out[j] != NULL)
                    out[j][i] = w;
                top[j] = w > top[j] ? w : top[j];
                bottom[j] = w < bottom[j] ? w : bottom[j];
                last[j] = w;
            }
        }
        if (bad)
            return -1;
        for (int j = 0; j < k; j++) {
            maxima[j * n_segments + s] = top[j];
            minima[j * n_segments + s] = bottom[j];
            if (hold[j] && !(last[j] >= HOLD_FLOOR)) {
                p[j] = 0.0;
                age[j] = 0;
            }
        }
    }
    for (int j = 0; j < k; j++) {
        state[j] = y[j];
        if (hold[j])
            held[j] = p[j] * table->decay[age[j]];
    }
    return 0;
}

/* The loop above for the engine's case, F and S stored and I held, written out so that the
 * compiler keeps everything in registers (the same operations in the same order). */
static int time_weighting_fsi(const double *x, const long long *edges, Py_ssize_t n_segments,
                              const double *a, const double *b, const HoldTable *table,
                              double *state, double *held, double *out_f, double *out_s,
                              double *maxima, double *minima)
{
    double yf = state[0], ys = state[1], yi = state[2], p = held[2], h = 0.0;
    Py_ssize_t age = 0;
    const double af = a[0], bf = b[0], as = a[1], bs = b[1], ai = a[2], bi = b[2];
    for (Py_ssize_t s = 0; s < n_segments; s++) {
        double top_f = -HUGE_VAL, low_f = HUGE_VAL, top_s = -HUGE_VAL, low_s = HUGE_VAL;
        double top_i = -HUGE_VAL, low_i = HUGE_VAL;
        int bad = 0;
        for (long long i = edges[s]; i < edges[s + 1]; i++) {
            double v = x[i];
            bad |= !(v >= 0.0 && v <= DBL_MAX);
            yf = bf * v + af * yf;
            ys = bs * v + as * ys;
            yi = bi * v + ai * yi;
            h = hold_step(yi, &p, &age, table);
            out_f[i] = yf;
            out_s[i] = ys;
            top_f = yf > top_f ? yf : top_f;
            low_f = yf < low_f ? yf : low_f;
            top_s = ys > top_s ? ys : top_s;
            low_s = ys < low_s ? ys : low_s;
            top_i = h > top_i ? h : top_i;
            low_i = h < low_i ? h : low_i;
        }
        if (bad)
            return -1;
        maxima[s] = top_f;
        minima[s] = low_f;
        maxima[n_segments + s] = top_s;
        minima[n_segments + s] = low_s;
        maxima[2 * n_segments + s] = top_i;
        minima[2 * n_segments + s] = low_i;
        if (!(h >= HOLD_FLOOR)) {
            p = 0.0;
            age = 0;
        }
    }
    state[0] = yf;
    state[1] = ys;
    state[2] = yi;
    held[2] = p * table->decay[age];
    return 0;
}

static PyObject *time_weighting(PyObject *self, PyObject *args)
{
    enum { X, EDGES, COEF, STATE, HELD, TABLE, MAXIMA, MINIMA, OUT0 };
    ArrayArg a[OUT0 + MAX_CHAINS] = {
        ARRAY_ARG('d', 0, "x"),      ARRAY_ARG('q', 0, "edges"),
        ARRAY_ARG('d', 0, "coefficients"), ARRAY_ARG('d', 1, "states"),
        ARRAY_ARG('d', 1, "held"),   ARRAY_ARG('d', 0, "decay"),
        ARRAY_ARG('d', 1, "maxima"), ARRAY_ARG('d', 1, "minima"),
    };
    PyObject *outs_obj;
    (void)self;
    if (!PyArg_ParseTuple(args, "OOOOOOOOO", &a[X].obj, &a[EDGES].obj, &a[COEF].obj,
                          &a[STATE].obj, &a[HELD].obj, &a[TABLE].obj, &outs_obj,
                          &a[MAXIMA].obj, &a[MINIMA].obj))
        return NULL;
    if (!PyTuple_Check(outs_obj) || PyTuple_GET_SIZE(outs_obj) > MAX_CHAINS) {
        PyErr_SetString(PyExc_TypeError, "outputs must be a tuple of up to 3 arrays or None");
        return NULL;
    }
    int n_outs = (int)PyTuple_GET_SIZE(outs_obj);
    for (int j = 0; j < n_outs; j++)
        a[OUT0 + j] = (ArrayArg){.obj = PyTuple_GET_ITEM(outs_obj, j), .kind = 'd',
                                 .writable = 1, .name = "output"};
    int count = OUT0 + n_outs;
    if (acquire_arrays(a, count) < 0)
        return NULL;
    PyObject *result = NULL;
    long long *e_copy = NULL;
    Py_ssize_t n = values(&a[X]);
    int k = (int)values(&a[STATE]);
    Py_ssize_t n_segments = values(&a[EDGES]) - 1;
    if (k < 1 || k > MAX_CHAINS || n_outs != k || values(&a[COEF]) != 3 * k
        || values(&a[HELD]) != k || n_segments < 1 || values(&a[MAXIMA]) < k * n_segments
        || values(&a[MINIMA]) < k * n_segments || values(&a[TABLE]) < 2) {
        PyErr_SetString(PyExc_ValueError, "time_weighting: inconsistent array sizes");
        goto done;
    }
    double *out[MAX_CHAINS];
    for (int j = 0; j < k; j++) {
        out[j] = (double *)a[OUT0 + j].view.buf; /* NULL: maxima only */
        if (out[j] != NULL && values(&a[OUT0 + j]) < n) {
            PyErr_SetString(PyExc_ValueError, "time_weighting: output shorter than x");
            goto done;
        }
    }
    /* the loops read the edges as they go: a private copy, checked, so that outputs sharing
     * memory with them cannot move a bound after it was checked */
    e_copy = PyMem_Malloc(sizeof(long long) * (size_t)(n_segments + 1));
    if (e_copy == NULL) {
        PyErr_NoMemory();
        goto done;
    }
    memcpy(e_copy, a[EDGES].view.buf, sizeof(long long) * (size_t)(n_segments + 1));
    if (e_copy[0] != 0 || e_copy[n_segments] != n) {
        PyErr_SetString(PyExc_ValueError, "time_weighting: edges must run from 0 to len(x)");
        goto done;
    }
    for (Py_ssize_t s = 0; s < n_segments; s++) {
        if (e_copy[s + 1] <= e_copy[s]) {
            PyErr_SetString(PyExc_ValueError, "time_weighting: edges must increase");
            goto done;
        }
    }
    const double *c = (const double *)a[COEF].view.buf; /* rows (a, b, hold) */
    double ca[MAX_CHAINS], cb[MAX_CHAINS];
    int hold[MAX_CHAINS];
    for (int j = 0; j < k; j++) {
        ca[j] = c[3 * j];
        cb[j] = c[3 * j + 1];
        hold[j] = c[3 * j + 2] != 0.0;
    }
    const HoldTable decay = {(const double *)a[TABLE].view.buf, values(&a[TABLE])};
    const double *x = (const double *)a[X].view.buf;
    double *state = (double *)a[STATE].view.buf, *held = (double *)a[HELD].view.buf;
    double *top = (double *)a[MAXIMA].view.buf, *bottom = (double *)a[MINIMA].view.buf;
    int status;
    Py_BEGIN_ALLOW_THREADS
    if (k == 3 && out[0] && out[1] && !out[2] && !hold[0] && !hold[1] && hold[2])
        status = time_weighting_fsi(x, e_copy, n_segments, ca, cb, &decay, state, held,
                                    out[0], out[1], top, bottom);
    else
        status = time_weighting_loop(x, e_copy, n_segments, k, ca, cb, hold, &decay, state,
                                     held, out, top, bottom);
    Py_END_ALLOW_THREADS
    result = PyBool_FromLong(status == 0);
done:
    PyMem_Free(e_copy);
    release_arrays(a, count);
    return result;
}

/*
 * Band filters of one filter-bank stage (bandmeter.filterbank): n_bands cascades of
 * second-order sections on the same input, in the arithmetic of scipy.signal.sosfilt
 * (transposed direct form II; per section y = b0 x + z0, z0 = (b1 x - a1 y) + z1,
 * z1 = b2 x - a2 y, rounded in that order), so each band's output is sosfilt's. The bands
 * run side by side in the lanes of vector registers (4 with AVX2, 2 with SSE2, else one at
 * a time): a single cascade waits on each result (sosfilt's speed limit), several in lanes
 * fill the arithmetic units instead. Every FLUSH_EVERY samples, states below 1e-200 in
 * magnitude are set to 0, so that digital silence does not leave them in slow subnormal
 * arithmetic (the outputs differ from sosfilt's only after falling below that, more than
 * 4000 dB down).
 *
 * sos: (n_bands, n_sections, 6) rows b0 b1 b2 a0 a1 a2 (a0 = 1), zi: (n_bands, n_sections,
 * 2) in/out, out: n_bands rows of out_stride values (the first n of each written).
 */
#define FLUSH_EVERY 256
#define STATE_FLOOR_C 1e-200
#define MAX_SECTIONS 16

static void sos_bands_scalar(const double *x, Py_ssize_t n, const double *sos, double *zi,
                             Py_ssize_t n_sections, double *out)
{
    double c[MAX_SECTIONS][5], z[MAX_SECTIONS][2];
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        const double *row = sos + 6 * s;
        c[s][0] = row[0];
        c[s][1] = row[1];
        c[s][2] = row[2];
        c[s][3] = row[4];
        c[s][4] = row[5];
        z[s][0] = zi[2 * s];
        z[s][1] = zi[2 * s + 1];
    }
    for (Py_ssize_t i0 = 0; i0 < n; i0 += FLUSH_EVERY) {
        Py_ssize_t i1 = i0 + FLUSH_EVERY < n ? i0 + FLUSH_EVERY : n;
        for (Py_ssize_t i = i0; i < i1; i++) {
            double v = x[i];
            for (Py_ssize_t s = 0; s < n_sections; s++) {
                double y = c[s][0] * v + z[s][0];
                z[s][0] = (c[s][1] * v - c[s][3] * y) + z[s][1];
                z[s][1] = c[s][2] * v - c[s][4] * y;
                v = y;
            }
            out[i] = v;
        }
        for (Py_ssize_t s = 0; s < n_sections; s++)
            for (int k = 0; k < 2; k++)
                if (fabs(z[s][k]) < STATE_FLOOR_C)
                    z[s][k] = 0.0;
    }
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        zi[2 * s] = z[s][0];
        zi[2 * s + 1] = z[s][1];
    }
}

/* Section s of each of `width` bands, one row per quantity and one column per lane:
 * lane[q][b] for q = b0 b1 b2 a1 a2 z0 z1, ready for an unaligned vector load of each row
 * (idle lanes are 0: they filter nothing and are never stored). */
#define LANES_MAX 4
static void gather_lanes(const double *sos, const double *zi, Py_ssize_t n_sections,
                         Py_ssize_t s, int width, double lane[7][LANES_MAX])
{
    memset(lane, 0, sizeof(double) * 7 * LANES_MAX);
    for (int b = 0; b < width; b++) {
        const double *row = sos + 6 * (b * n_sections + s);
        const double *st = zi + 2 * (b * n_sections + s);
        lane[0][b] = row[0];
        lane[1][b] = row[1];
        lane[2][b] = row[2];
        lane[3][b] = row[4];
        lane[4][b] = row[5];
        lane[5][b] = st[0];
        lane[6][b] = st[1];
    }
}

/* The states of section s back from their lanes (z0 in lo, z1 in hi). */
static void scatter_states(double *zi, Py_ssize_t n_sections, Py_ssize_t s, int width,
                           const double *lo, const double *hi)
{
    for (int b = 0; b < width; b++) {
        zi[2 * (b * n_sections + s)] = lo[b];
        zi[2 * (b * n_sections + s) + 1] = hi[b];
    }
}

#if defined(__SSE2__)
/* Two bands in the lanes of SSE2 registers (the second lane idle when width is 1). */
static void sos_bands_sse2(const double *x, Py_ssize_t n, const double *sos, double *zi,
                           Py_ssize_t n_sections, int width, double *out, Py_ssize_t stride)
{
    __m128d c[MAX_SECTIONS][5], z[MAX_SECTIONS][2];
    const __m128d sign = _mm_set1_pd(-0.0), tiny = _mm_set1_pd(STATE_FLOOR_C);
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        double lane[7][LANES_MAX];
        gather_lanes(sos, zi, n_sections, s, width, lane);
        for (int k = 0; k < 5; k++)
            c[s][k] = _mm_loadu_pd(lane[k]);
        z[s][0] = _mm_loadu_pd(lane[5]);
        z[s][1] = _mm_loadu_pd(lane[6]);
    }
    for (Py_ssize_t i0 = 0; i0 < n; i0 += FLUSH_EVERY) {
        Py_ssize_t i1 = i0 + FLUSH_EVERY < n ? i0 + FLUSH_EVERY : n;
        for (Py_ssize_t i = i0; i < i1; i++) {
            __m128d v = _mm_set1_pd(x[i]);
            for (Py_ssize_t s = 0; s < n_sections; s++) {
                __m128d y = _mm_add_pd(_mm_mul_pd(c[s][0], v), z[s][0]);
                z[s][0] = _mm_add_pd(_mm_sub_pd(_mm_mul_pd(c[s][1], v),
                                                _mm_mul_pd(c[s][3], y)), z[s][1]);
                z[s][1] = _mm_sub_pd(_mm_mul_pd(c[s][2], v), _mm_mul_pd(c[s][4], y));
                v = y;
            }
            _mm_store_sd(out + i, v);
            if (width > 1)
                _mm_storeh_pd(out + stride + i, v);
        }
        for (Py_ssize_t s = 0; s < n_sections; s++)
            for (int k = 0; k < 2; k++)
                z[s][k] = _mm_andnot_pd(_mm_cmplt_pd(_mm_andnot_pd(sign, z[s][k]), tiny),
                                        z[s][k]); /* only |z| < 1e-200 to 0: NaN stays */
    }
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        double lo[2], hi[2];
        _mm_storeu_pd(lo, z[s][0]);
        _mm_storeu_pd(hi, z[s][1]);
        scatter_states(zi, n_sections, s, width, lo, hi);
    }
}
#endif

#if defined(HAVE_AVX2_DISPATCH)
/* Four bands in the lanes of AVX registers (idle lanes when width < 4); the outputs of four
 * samples are transposed in registers and stored four to a band. */
__attribute__((target("avx2")))
static void sos_bands_avx2(const double *x, Py_ssize_t n, const double *sos, double *zi,
                           Py_ssize_t n_sections, int width, double *out, Py_ssize_t stride)
{
    __m256d c[MAX_SECTIONS][5], z[MAX_SECTIONS][2];
    const __m256d sign = _mm256_set1_pd(-0.0), tiny = _mm256_set1_pd(STATE_FLOOR_C);
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        double lane[7][LANES_MAX];
        gather_lanes(sos, zi, n_sections, s, width, lane);
        for (int k = 0; k < 5; k++)
            c[s][k] = _mm256_loadu_pd(lane[k]);
        z[s][0] = _mm256_loadu_pd(lane[5]);
        z[s][1] = _mm256_loadu_pd(lane[6]);
    }
    double tail[4][4];
    for (Py_ssize_t i0 = 0; i0 < n; i0 += FLUSH_EVERY) {
        Py_ssize_t i1 = i0 + FLUSH_EVERY < n ? i0 + FLUSH_EVERY : n;
        Py_ssize_t i = i0;
        for (; i < i1; i += 4) {
            __m256d r[4];
            int m = i1 - i < 4 ? (int)(i1 - i) : 4;
            for (int t = 0; t < 4; t++) {
                __m256d v = _mm256_set1_pd(t < m ? x[i + t] : 0.0);
                if (t < m) {
                    for (Py_ssize_t s = 0; s < n_sections; s++) {
                        __m256d y = _mm256_add_pd(_mm256_mul_pd(c[s][0], v), z[s][0]);
                        z[s][0] = _mm256_add_pd(_mm256_sub_pd(_mm256_mul_pd(c[s][1], v),
                                                              _mm256_mul_pd(c[s][3], y)),
                                                z[s][1]);
                        z[s][1] = _mm256_sub_pd(_mm256_mul_pd(c[s][2], v),
                                                _mm256_mul_pd(c[s][4], y));
                        v = y;
                    }
                }
                r[t] = v;
            }
            /* r[t] holds sample i + t of the 4 bands: transpose to 4 samples of each band */
            __m256d lo01 = _mm256_unpacklo_pd(r[0], r[1]), hi01 = _mm256_unpackhi_pd(r[0], r[1]);
            __m256d lo23 = _mm256_unpacklo_pd(r[2], r[3]), hi23 = _mm256_unpackhi_pd(r[2], r[3]);
            __m256d band[4];
            band[0] = _mm256_permute2f128_pd(lo01, lo23, 0x20);
            band[1] = _mm256_permute2f128_pd(hi01, hi23, 0x20);
            band[2] = _mm256_permute2f128_pd(lo01, lo23, 0x31);
            band[3] = _mm256_permute2f128_pd(hi01, hi23, 0x31);
            if (m == 4) {
                for (int b = 0; b < width; b++)
                    _mm256_storeu_pd(out + b * stride + i, band[b]);
            } else {
                for (int b = 0; b < width; b++) {
                    _mm256_storeu_pd(tail[b], band[b]);
                    for (int t = 0; t < m; t++)
                        out[b * stride + i + t] = tail[b][t];
                }
            }
        }
        for (Py_ssize_t s = 0; s < n_sections; s++)
            for (int k = 0; k < 2; k++)
                z[s][k] = _mm256_andnot_pd( /* only |z| < 1e-200 to 0: NaN stays */
                    _mm256_cmp_pd(_mm256_andnot_pd(sign, z[s][k]), tiny, _CMP_LT_OQ), z[s][k]);
    }
    for (Py_ssize_t s = 0; s < n_sections; s++) {
        double lo[4], hi[4];
        _mm256_storeu_pd(lo, z[s][0]);
        _mm256_storeu_pd(hi, z[s][1]);
        scatter_states(zi, n_sections, s, width, lo, hi);
    }
}

static int have_avx2(void)
{
    static int known = -1;
    if (known < 0) {
        __builtin_cpu_init();
        known = __builtin_cpu_supports("avx2") ? 1 : 0;
    }
    return known;
}
#endif

/* The lane width the bands run in: 4 (AVX2), 2 (SSE2) or 1. */
static int sos_lanes(void)
{
#if defined(HAVE_AVX2_DISPATCH)
    if (have_avx2())
        return 4;
#endif
#if defined(__SSE2__)
    return 2;
#else
    return 1;
#endif
}

static void sos_bands_loop(const double *x, Py_ssize_t n, const double *sos, double *zi,
                           Py_ssize_t n_bands, Py_ssize_t n_sections, double *out,
                           Py_ssize_t stride, int lanes)
{
    for (Py_ssize_t b0 = 0; b0 < n_bands; b0 += lanes) {
        int width = n_bands - b0 < lanes ? (int)(n_bands - b0) : lanes;
        const double *s = sos + 6 * n_sections * b0;
        double *z = zi + 2 * n_sections * b0;
        double *o = out + stride * b0;
#if defined(HAVE_AVX2_DISPATCH)
        if (lanes == 4) {
            if (width >= 3) { /* else two lanes do the same work with less waste */
                sos_bands_avx2(x, n, s, z, n_sections, width, o, stride);
                continue;
            }
        }
#endif
#if defined(__SSE2__)
        if (lanes >= 2) {
            for (int b = 0; b < width; b += 2) {
                int w = width - b < 2 ? width - b : 2;
                sos_bands_sse2(x, n, s + 6 * n_sections * b, z + 2 * n_sections * b,
                               n_sections, w, o + stride * b, stride);
            }
            continue;
        }
#endif
        for (int b = 0; b < width; b++)
            sos_bands_scalar(x, n, s + 6 * n_sections * b, z + 2 * n_sections * b,
                             n_sections, o + stride * b);
    }
}

static PyObject *sos_bands(PyObject *self, PyObject *args)
{
    ArrayArg a[4] = {ARRAY_ARG('d', 0, "x"), ARRAY_ARG('d', 0, "sos"),
                     ARRAY_ARG('d', 1, "zi"), ARRAY_ARG('d', 1, "out")};
    Py_ssize_t n_sections, stride;
    int lanes = 0, ok = 0;
    (void)self;
    if (!PyArg_ParseTuple(args, "OOOnOn|i", &a[0].obj, &a[1].obj, &a[2].obj, &n_sections,
                          &a[3].obj, &stride, &lanes))
        return NULL;
    if (acquire_arrays(a, 4) < 0)
        return NULL;
    const double *sos = (const double *)a[1].view.buf;
    Py_ssize_t n = values(&a[0]);
    if (n_sections < 1 || n_sections > MAX_SECTIONS || values(&a[1]) % (6 * n_sections)) {
        PyErr_SetString(PyExc_ValueError, "sos_bands: sos must be (bands, sections, 6)");
        goto done;
    }
    Py_ssize_t n_bands = values(&a[1]) / (6 * n_sections);
    /* rows b * stride + [0, n) of out are written, b < n_bands; checked without overflow */
    Py_ssize_t n_out = values(&a[3]);
    if (values(&a[2]) != 2 * n_sections * n_bands || stride < n
        || (n_bands && (n_out < n || (n_bands > 1 && stride > (n_out - n) / (n_bands - 1))))) {
        PyErr_SetString(PyExc_ValueError, "sos_bands: inconsistent array sizes");
        goto done;
    }
    for (Py_ssize_t r = 0; r < n_bands * n_sections; r++) {
        if (sos[6 * r + 3] != 1.0) {
            PyErr_SetString(PyExc_ValueError, "sos_bands: every section needs a0 = 1");
            goto done;
        }
    }
    if (lanes == 0) {
        lanes = sos_lanes();
    } else if (lanes != 1 && lanes != 2 && lanes != 4) {
        PyErr_SetString(PyExc_ValueError, "sos_bands: lanes must be 1, 2 or 4");
        goto done;
    } else if (lanes > sos_lanes()) {
        lanes = sos_lanes();
    }
    Py_BEGIN_ALLOW_THREADS
    sos_bands_loop((const double *)a[0].view.buf, n, sos, (double *)a[2].view.buf, n_bands,
                   n_sections, (double *)a[3].view.buf, stride, lanes);
    Py_END_ALLOW_THREADS
    ok = 1;
done:
    release_arrays(a, 4);
    if (!ok)
        return NULL;
    return PyLong_FromLong(lanes);
}

static PyObject *lane_width(PyObject *self, PyObject *args)
{
    (void)self;
    (void)args;
    return PyLong_FromLong(sos_lanes());
}

static PyMethodDef kernel_methods[] = {
    {"lane_width", lane_width, METH_NOARGS,
     "lane_width() -> int\n\nBands per vector register of sos_bands on this processor: "
     "4 (AVX2), 2 (SSE2) or 1."},
    {"tile_maxima", tile_maxima, METH_VARARGS,
     "tile_maxima(x, start, n_tiles, tiles_abs, tiles_d2, near) -> bool\n\n"
     "Tile maxima of |x| and |D2| of the true-peak meter; False on a non-finite sample."},
    {"count_levels", count_levels, METH_VARARGS,
     "count_levels(levels, low_db, resolution_db, nbins, counts) -> (lowest, highest) | None\n\n"
     "Add levels (dB) to histogram counts (int64, nbins + 2 with under- and overflow);\n"
     "the lowest and highest index counted, or None on a NaN level (counts incomplete)."},
    {"time_weighting", time_weighting, METH_VARARGS,
     "time_weighting(x, edges, coefficients, states, held, decay, outputs, maxima, minima)"
     " -> bool\n\n"
     "Exponential averagers (rows a, b, hold of coefficients; hold != 0 adds a peak hold\n"
     "decaying by the table decay[m] = d**m) with\n"
     "per-segment maxima and minima; False (states untouched) on a negative or NaN sample."},
    {"sos_bands", sos_bands, METH_VARARGS,
     "sos_bands(x, sos, zi, n_sections, out, out_stride, lanes=0) -> lanes used\n\n"
     "Second-order-section cascades of several bands on one input, in sosfilt's\n"
     "arithmetic (zi in sosfilt's layout, updated); lanes 0 picks the widest available."},
    {NULL, NULL, 0, NULL},
};

static struct PyModuleDef kernel_module = {
    PyModuleDef_HEAD_INIT, "_kernels", "Compiled inner loops of bandmeter (optional).", -1,
    kernel_methods, NULL, NULL, NULL, NULL,
};

PyMODINIT_FUNC PyInit__kernels(void)
{
    return PyModule_Create(&kernel_module);
}
