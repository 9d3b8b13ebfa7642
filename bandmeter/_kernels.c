/*
 * Compiled inner loops of bandmeter (optional extension module ``bandmeter._kernels``).
 *
 * Each function here does exactly what a NumPy path in the package does, with the same
 * floating-point operations in the same order, so the results are the same to the last bit;
 * the package uses the NumPy path when this module is not built, and the tests compare the
 * two. Arrays are passed through the buffer protocol (C-contiguous float64); the Python
 * caller checks shapes and dtypes, this file checks every index against the buffer sizes.
 *
 * Built with -ffp-contract=off: no fused multiply-adds, so that every operation rounds as
 * NumPy's does.
 */
#define PY_SSIZE_T_CLEAN
#include <Python.h>
#include <math.h>

#if defined(__SSE2__)
#include <emmintrin.h>
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

static int float64_buffer(PyObject *obj, Py_buffer *view, int writable, const char *name)
{
    int flags = PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | (writable ? PyBUF_WRITABLE : 0);
    if (PyObject_GetBuffer(obj, view, flags) < 0)
        return -1;
    if (view->itemsize != 8 || view->format == NULL || strcmp(view->format, "d") != 0) {
        PyErr_Format(PyExc_TypeError, "%s must hold float64 values", name);
        PyBuffer_Release(view);
        return -1;
    }
    return 0;
}

static PyObject *tile_maxima(PyObject *self, PyObject *args)
{
    PyObject *x_obj, *abs_obj, *d2_obj, *near_obj;
    Py_ssize_t start, n_tiles;
    Py_buffer x, t_abs, t_d2, near;
    (void)self;
    if (!PyArg_ParseTuple(args, "OnnOOO", &x_obj, &start, &n_tiles, &abs_obj, &d2_obj,
                          &near_obj))
        return NULL;
    if (float64_buffer(x_obj, &x, 0, "x") < 0)
        return NULL;
    if (float64_buffer(abs_obj, &t_abs, 1, "tiles_abs") < 0) {
        PyBuffer_Release(&x);
        return NULL;
    }
    if (float64_buffer(d2_obj, &t_d2, 1, "tiles_d2") < 0) {
        PyBuffer_Release(&x);
        PyBuffer_Release(&t_abs);
        return NULL;
    }
    if (float64_buffer(near_obj, &near, 1, "near") < 0) {
        PyBuffer_Release(&x);
        PyBuffer_Release(&t_abs);
        PyBuffer_Release(&t_d2);
        return NULL;
    }
    Py_ssize_t n_x = x.len / 8;
    int result = -1;
    if (n_tiles < 2 || start < 1 || start + TILE * n_tiles + 1 > n_x
        || t_abs.len / 8 < n_tiles || t_d2.len / 8 < n_tiles || near.len / 8 < n_tiles - 2) {
        PyErr_SetString(PyExc_ValueError, "tile_maxima: arrays too short for the tiles");
    } else {
        Py_BEGIN_ALLOW_THREADS
        result = tile_maxima_loop((const double *)x.buf, start, n_tiles, (double *)t_abs.buf,
                                  (double *)t_d2.buf, (double *)near.buf);
        Py_END_ALLOW_THREADS
    }
    PyBuffer_Release(&x);
    PyBuffer_Release(&t_abs);
    PyBuffer_Release(&t_d2);
    PyBuffer_Release(&near);
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
    PyObject *levels_obj, *counts_obj;
    double low_db, resolution_db;
    Py_ssize_t nbins;
    Py_buffer levels, counts;
    (void)self;
    if (!PyArg_ParseTuple(args, "OddnO", &levels_obj, &low_db, &resolution_db, &nbins,
                          &counts_obj))
        return NULL;
    if (float64_buffer(levels_obj, &levels, 0, "levels") < 0)
        return NULL;
    if (PyObject_GetBuffer(counts_obj, &counts,
                           PyBUF_C_CONTIGUOUS | PyBUF_FORMAT | PyBUF_WRITABLE) < 0) {
        PyBuffer_Release(&levels);
        return NULL;
    }
    Py_ssize_t lowest = 0, highest = 0;
    int ok = counts.itemsize == 8 && counts.format != NULL
             && (strcmp(counts.format, "l") == 0 || strcmp(counts.format, "q") == 0)
             && sizeof(long long) == 8;
    if (!ok) {
        PyErr_SetString(PyExc_TypeError, "counts must hold int64 values");
    } else if (nbins < 1 || counts.len / 8 < nbins + 2 || !(resolution_db > 0.0)) {
        PyErr_SetString(PyExc_ValueError, "count_levels: counts shorter than nbins + 2");
        ok = 0;
    } else {
        Py_BEGIN_ALLOW_THREADS
        count_levels_loop((const double *)levels.buf, levels.len / 8, low_db, resolution_db,
                          nbins, (long long *)counts.buf, &lowest, &highest);
        Py_END_ALLOW_THREADS
    }
    PyBuffer_Release(&levels);
    PyBuffer_Release(&counts);
    if (!ok)
        return NULL;
    if (lowest < 0)
        Py_RETURN_NONE;
    return Py_BuildValue("nn", lowest, highest);
}

static PyMethodDef kernel_methods[] = {
    {"tile_maxima", tile_maxima, METH_VARARGS,
     "tile_maxima(x, start, n_tiles, tiles_abs, tiles_d2, near) -> bool\n\n"
     "Tile maxima of |x| and |D2| of the true-peak meter; False on a non-finite sample."},
    {"count_levels", count_levels, METH_VARARGS,
     "count_levels(levels, low_db, resolution_db, nbins, counts) -> (lowest, highest) | None\n\n"
     "Add levels (dB) to histogram counts (int64, nbins + 2 with under- and overflow);\n"
     "the lowest and highest index counted, or None on a NaN level (counts incomplete)."},
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
