/* NWB 2.x recordings (HDF5): one ElectricalSeries, read one window at a time by hyperslab.
 * Source: NWB:N format specification 2.x (nwb-schema, core namespace): an ElectricalSeries is a group
 * with attribute neurodata_type = "ElectricalSeries", in /acquisition or in a processing module (possibly
 * inside a container such as LFP); dataset `data` [time] or [time, channel] with attributes `conversion`
 * (default 1), `offset` (default 0, schema 2.5), `resolution` and `unit` ("volts"): value in `unit` =
 * data * conversion + offset; dataset `starting_time` with attribute `rate` [Hz], or `timestamps` [s];
 * dataset `electrodes`: row indices into /general/extracellular_ephys/electrodes, whose columns give each
 * channel's name (`label`, else `name`).
 * HDF5 prints its error stack by default, per thread: every entry point switches that off for the calling
 * thread (the library must not print). Debian's libhdf5 is built thread-safe, so windows of different
 * files may be read from several threads.
 */
#include "signal/trace_backend.h"
#include "core/strutil.h"

#include <hdf5.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

typedef struct {
    hid_t file, data, space;
    size_t channels;
    double conversion, offset;
    char *path;
} nwb_file;

static void quiet(void) { H5Eset_auto2(H5E_DEFAULT, NULL, NULL); }

static void nwb_close(void *impl)
{
    nwb_file *w = impl;
    if (!w) return;
    quiet();
    if (w->space > 0) H5Sclose(w->space);
    if (w->data > 0) H5Dclose(w->data);
    if (w->file > 0) H5Fclose(w->file);
    free(w->path);
    free(w);
}

static bl_status nwb_read(void *impl, int64_t start, size_t n, double *buf, bl_error *err)
{
    nwb_file *w = impl;
    quiet();
    hsize_t off[2] = {(hsize_t)start, 0}, cnt[2] = {(hsize_t)n, (hsize_t)w->channels};
    int rank = H5Sget_simple_extent_ndims(w->space);
    hid_t mem = H5Screate_simple(rank, cnt, NULL);
    herr_t rc = mem < 0 ? -1 : H5Sselect_hyperslab(w->space, H5S_SELECT_SET, off, NULL, cnt, NULL);
    if (rc >= 0) rc = H5Dread(w->data, H5T_NATIVE_DOUBLE, mem, w->space, H5P_DEFAULT, buf);
    if (mem >= 0) H5Sclose(mem);
    if (rc < 0)
        return bl_error_set(err, BL_ERR_IO, "%s: HDF5 could not read samples %lld to %lld of the ElectricalSeries data",
                            w->path, (long long)start, (long long)start + (long long)n - 1);
    if (w->conversion != 1.0 || w->offset != 0.0)
        for (size_t i = 0; i < n * w->channels; i++) buf[i] = buf[i] * w->conversion + w->offset;
    return BL_OK;
}

/* A string attribute (variable or fixed length) into out; 0 when absent or not a string. */
static int string_attr(hid_t obj, const char *name, char *out, size_t size)
{
    out[0] = '\0';
    if (H5Aexists(obj, name) <= 0) return 0;
    hid_t a = H5Aopen(obj, name, H5P_DEFAULT), ft = a >= 0 ? H5Aget_type(a) : -1;
    int ok = 0;
    if (ft >= 0 && H5Tget_class(ft) == H5T_STRING) {
        hid_t mt = H5Tcopy(H5T_C_S1);
        H5Tset_cset(mt, H5Tget_cset(ft));
        if (H5Tis_variable_str(ft) > 0) {
            char *s = NULL;
            H5Tset_size(mt, H5T_VARIABLE);
            if (H5Aread(a, mt, &s) >= 0 && s) {
                snprintf(out, size, "%s", s);
                ok = 1;
            }
            if (s) H5free_memory(s);
        } else {
            size_t n = H5Tget_size(ft);
            char *s = calloc(n + 1, 1);
            H5Tset_size(mt, n + 1);
            if (s && H5Aread(a, mt, s) >= 0) {
                snprintf(out, size, "%s", s);
                ok = 1;
            }
            free(s);
        }
        H5Tclose(mt);
    }
    if (ft >= 0) H5Tclose(ft);
    if (a >= 0) H5Aclose(a);
    return ok;
}

static double number_attr(hid_t obj, const char *name, double fallback)
{
    if (H5Aexists(obj, name) <= 0) return fallback;
    hid_t a = H5Aopen(obj, name, H5P_DEFAULT);
    double v = fallback;
    if (a < 0 || H5Aread(a, H5T_NATIVE_DOUBLE, &v) < 0) v = NAN;
    if (a >= 0) H5Aclose(a);
    return v;
}

typedef struct {
    char found[8][512];
    size_t n;
} series_list;

static herr_t find_series(hid_t root, const char *name, const H5L_info_t *info, void *data)
{
    (void)info;
    series_list *l = data;
    if (strncmp(name, "acquisition/", 12) != 0 && strncmp(name, "processing/", 11) != 0) return 0;
    hid_t g = H5Gopen2(root, name, H5P_DEFAULT); /* fails quietly for datasets (the same call in HDF5 1.10-1.14) */
    if (g < 0) return 0;
    char type[64];
    if (string_attr(g, "neurodata_type", type, sizeof type) && strcmp(type, "ElectricalSeries") == 0 && l->n < 8)
        snprintf(l->found[l->n++], sizeof l->found[0], "/%s", name);
    H5Gclose(g);
    return 0;
}

/* Column `col` of a string dataset (variable or fixed length), all `rows` entries malloc'd into out. */
static int read_strings(hid_t d, size_t rows, char **out)
{
    hid_t ft = H5Dget_type(d), sp = H5Dget_space(d);
    int ok = 0;
    hssize_t n = sp >= 0 ? H5Sget_simple_extent_npoints(sp) : -1;
    if (ft >= 0 && H5Tget_class(ft) == H5T_STRING && n == (hssize_t)rows) {
        hid_t mt = H5Tcopy(H5T_C_S1);
        H5Tset_cset(mt, H5Tget_cset(ft));
        if (H5Tis_variable_str(ft) > 0) {
            char **v = calloc(rows, sizeof *v);
            H5Tset_size(mt, H5T_VARIABLE);
            if (v && H5Dread(d, mt, H5S_ALL, H5S_ALL, H5P_DEFAULT, v) >= 0) {
                ok = 1;
                for (size_t i = 0; i < rows; i++)
                    if (!(out[i] = bl_strdup(v[i] ? v[i] : ""))) ok = 0;
                H5Dvlen_reclaim(mt, sp, H5P_DEFAULT, v);
            }
            free(v);
        } else {
            size_t w = H5Tget_size(ft);
            char *v = calloc(rows, w + 1);
            H5Tset_size(mt, w + 1);
            if (v && H5Dread(d, mt, H5S_ALL, H5S_ALL, H5P_DEFAULT, v) >= 0) {
                ok = 1;
                for (size_t i = 0; i < rows; i++)
                    if (!(out[i] = bl_strdup(v + i * (w + 1)))) ok = 0;
            }
            free(v);
        }
        H5Tclose(mt);
    }
    if (ft >= 0) H5Tclose(ft);
    if (sp >= 0) H5Sclose(sp);
    return ok;
}

/* Channel names through the series' `electrodes` rows; b->names stays NULL when the table names none. */
static bl_status electrode_names(const char *path, hid_t file, hid_t series, const char *where, size_t channels,
                                 bl_trace_backend *b, bl_error *err)
{
    if (H5Lexists(series, "electrodes", H5P_DEFAULT) <= 0 ||
        H5Lexists(file, "/general/extracellular_ephys/electrodes", H5P_DEFAULT) <= 0)
        return BL_OK;
    hid_t ed = H5Dopen2(series, "electrodes", H5P_DEFAULT);
    hid_t sp = ed >= 0 ? H5Dget_space(ed) : -1;
    hssize_t n = sp >= 0 ? H5Sget_simple_extent_npoints(sp) : -1;
    if (sp >= 0) H5Sclose(sp);
    long long *rows = n > 0 ? malloc((size_t)n * sizeof *rows) : NULL;
    bl_status st = BL_OK;
    if (ed < 0 || n != (hssize_t)channels) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: %s/electrodes has %lld rows but data has %zu channels", path, where,
                          (long long)n, channels);
        goto done;
    }
    if (!rows || H5Dread(ed, H5T_NATIVE_LLONG, H5S_ALL, H5S_ALL, H5P_DEFAULT, rows) < 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: cannot read %s/electrodes as row numbers", path, where);
        goto done;
    }
    hid_t table = H5Gopen2(file, "/general/extracellular_ephys/electrodes", H5P_DEFAULT);
    const char *column = NULL;
    static const char *const candidates[] = {"label", "name", "channel_name"};
    for (size_t k = 0; k < 3 && !column && table >= 0; k++)
        if (H5Lexists(table, candidates[k], H5P_DEFAULT) > 0) column = candidates[k];
    if (column) {
        hid_t cd = H5Dopen2(table, column, H5P_DEFAULT), csp = cd >= 0 ? H5Dget_space(cd) : -1;
        size_t n_rows = csp >= 0 ? (size_t)H5Sget_simple_extent_npoints(csp) : 0;
        char **all = calloc(n_rows ? n_rows : 1, sizeof *all);
        if (csp >= 0) H5Sclose(csp);
        if (!all || cd < 0 || !read_strings(cd, n_rows, all))
            st = bl_error_set(err, BL_ERR_INPUT, "%s: cannot read the electrodes table's \"%s\" column as text", path,
                              column);
        else if (!(b->names = calloc(channels, sizeof *b->names)))
            st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
        for (size_t c = 0; !st && c < channels; c++) {
            if (rows[c] < 0 || (size_t)rows[c] >= n_rows) {
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s: %s/electrodes[%zu] = %lld, outside the electrodes table (%zu "
                                  "rows)",
                                  path, where, c, rows[c], n_rows);
                break;
            }
            const char *name = all[rows[c]];
            for (size_t j = 0; j < c && !st; j++)
                if (strcmp(b->names[j], name) == 0)
                    st = bl_error_set(err, BL_ERR_INPUT,
                                      "%s: channels %zu and %zu of %s are both named \"%s\" in the "
                                      "electrodes table's \"%s\" column",
                                      path, j + 1, c + 1, where, name, column);
            if (!st && !*name)
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s: channel %zu of %s has an empty \"%s\" in the electrodes table", path, c + 1,
                                  where, column);
            if (!st && !(b->names[c] = bl_strdup(name)))
                st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
        }
        bl_trace_strings_free(all, n_rows);
        if (cd >= 0) H5Dclose(cd);
        if (st) {
            bl_trace_strings_free(b->names, channels);
            b->names = NULL;
        }
    }
    if (table >= 0) H5Gclose(table);
done:
    free(rows);
    if (ed >= 0) H5Dclose(ed);
    return st;
}

/* Sampling rate from starting_time's `rate`, or from evenly spaced timestamps. */
static bl_status series_rate(const char *path, hid_t series, const char *where, int64_t frames, double *rate,
                             bl_error *err)
{
    if (H5Lexists(series, "starting_time", H5P_DEFAULT) > 0) {
        hid_t d = H5Dopen2(series, "starting_time", H5P_DEFAULT);
        *rate = d >= 0 ? number_attr(d, "rate", NAN) : NAN;
        if (d >= 0) H5Dclose(d);
        if (!(*rate > 0) || !isfinite(*rate))
            return bl_error_set(err, BL_ERR_INPUT, "%s: %s/starting_time has no attribute \"rate\" > 0 (got %.17g)",
                                path, where, *rate);
        return BL_OK;
    }
    if (H5Lexists(series, "timestamps", H5P_DEFAULT) <= 0)
        return bl_error_set(err, BL_ERR_INPUT, "%s: %s has neither starting_time (with rate) nor timestamps", path,
                            where);
    hid_t d = H5Dopen2(series, "timestamps", H5P_DEFAULT), sp = d >= 0 ? H5Dget_space(d) : -1;
    hssize_t n = sp >= 0 ? H5Sget_simple_extent_npoints(sp) : -1;
    double *t = n == frames && n >= 2 ? malloc((size_t)n * sizeof *t) : NULL;
    bl_status st = BL_OK;
    if (n != frames || n < 2)
        st = bl_error_set(err, BL_ERR_INPUT, "%s: %s/timestamps has %lld entries but data has %lld samples", path,
                          where, (long long)n, (long long)frames);
    else if (!t || H5Dread(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, t) < 0)
        st = bl_error_set(err, BL_ERR_INPUT, "%s: cannot read %s/timestamps as numbers", path, where);
    else {
        *rate = (double)(n - 1) / (t[n - 1] - t[0]);
        for (hssize_t i = 0; i < n && !st; i++)
            if (!(fabs(t[i] - t[0] - (double)i / *rate) <= 0.01 / *rate))
                st = bl_error_set(err, BL_ERR_INPUT,
                                  "%s: %s/timestamps[%lld] = %.17g is not on the even grid of %.10g Hz "
                                  "from %.17g s; windows need a constant rate",
                                  path, where, (long long)i, t[i], *rate, t[0]);
    }
    free(t);
    if (sp >= 0) H5Sclose(sp);
    if (d >= 0) H5Dclose(d);
    return st;
}

static bl_status choose_series(const char *path, const char *want, hid_t file, char *where, size_t size, bl_error *err)
{
    series_list l;
    l.n = 0;
    H5Lvisit(file, H5_INDEX_NAME, H5_ITER_INC, find_series, &l);
    if (l.n == 0)
        return bl_error_set(err, BL_ERR_INPUT, "%s: no ElectricalSeries in /acquisition or /processing", path);
    if (want) { /* recordings.series: the full path, or the path's last part when that is unambiguous */
        size_t hits = 0, pick = 0, wl = strlen(want);
        for (size_t i = 0; i < l.n; i++) {
            size_t fl = strlen(l.found[i]);
            int full = strcmp(l.found[i], want) == 0 || strcmp(l.found[i] + 1, want) == 0;
            int tail = fl > wl && strcmp(l.found[i] + fl - wl, want) == 0 && l.found[i][fl - wl - 1] == '/';
            if (full || tail) pick = i, hits++;
        }
        if (hits != 1)
            return bl_error_set(err, BL_ERR_INPUT,
                                "key \"recordings.series\": \"%s\" matches %zu of the %zu "
                                "ElectricalSeries in %s (%s%s%s%s)",
                                want, hits, l.n, path, l.found[0], l.n > 1 ? ", " : "", l.n > 1 ? l.found[1] : "",
                                l.n > 2 ? ", ..." : "");
        snprintf(where, size, "%s", l.found[pick]);
        return BL_OK;
    }
    size_t pick = 0, in_acq = 0;
    for (size_t i = 0; i < l.n; i++)
        if (strncmp(l.found[i], "/acquisition/", 13) == 0 && in_acq++ == 0) pick = i;
    if (in_acq > 1 || (in_acq == 0 && l.n > 1))
        return bl_error_set(err, BL_ERR_INPUT, "%s: %zu ElectricalSeries (%s, %s%s); keep one per file", path, l.n,
                            l.found[0], l.found[1], l.n > 2 ? ", ..." : "; choose one with recordings.series");
    snprintf(where, size, "%s", l.found[pick]);
    return BL_OK;
}

bl_status bl_trace_nwb_open(const char *path, bl_trace_info *info, bl_trace_backend *b, bl_error *err)
{
    quiet();
    bl_status st = BL_OK;
    hid_t series = -1;
    char where[512];
    nwb_file *w = calloc(1, sizeof *w);
    if (!w || !(w->path = bl_strdup(path))) {
        free(w);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory opening %s", path);
    }
    w->file = w->data = w->space = -1;
    if (H5Fis_hdf5(path) <= 0 || (w->file = H5Fopen(path, H5F_ACC_RDONLY, H5P_DEFAULT)) < 0) {
        FILE *f = fopen(path, "rb");
        if (f) fclose(f);
        st = bl_error_set(err, BL_ERR_INPUT, "%s: cannot open the recording: %s", path,
                          f ? "not an HDF5 (NWB) file" : "no such file or not readable");
        goto fail;
    }
    if ((st = choose_series(path, b->series, w->file, where, sizeof where, err))) goto fail;
    series = H5Gopen2(w->file, where, H5P_DEFAULT);
    if (series < 0 || H5Lexists(series, "data", H5P_DEFAULT) <= 0 ||
        (w->data = H5Dopen2(series, "data", H5P_DEFAULT)) < 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: %s has no dataset \"data\"", path, where);
        goto fail;
    }
    w->space = H5Dget_space(w->data);
    hsize_t dims[2] = {0, 1};
    int rank = w->space >= 0 ? H5Sget_simple_extent_ndims(w->space) : -1;
    if (rank < 1 || rank > 2 || H5Sget_simple_extent_dims(w->space, dims, NULL) < 0 || dims[0] < 1 || dims[1] < 1) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: %s/data has %d dimensions; [time] or [time, channel] is expected",
                          path, where, rank);
        goto fail;
    }
    w->channels = rank == 2 ? (size_t)dims[1] : 1;
    w->conversion = number_attr(w->data, "conversion", 1.0);
    w->offset = number_attr(w->data, "offset", 0.0);
    if (!isfinite(w->conversion) || w->conversion == 0 || !isfinite(w->offset)) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: %s/data attributes conversion = %.17g, offset = %.17g are not usable",
                          path, where, w->conversion, w->offset);
        goto fail;
    }
    char unit[64];
    if (!string_attr(w->data, "unit", unit, sizeof unit)) snprintf(unit, sizeof unit, "volts");
    if ((st = series_rate(path, series, where, (int64_t)dims[0], &info->rate, err))) goto fail;
    if ((st = electrode_names(path, w->file, series, where, w->channels, b, err))) goto fail;
    if (!(b->units = calloc(w->channels, sizeof *b->units))) goto nomem;
    for (size_t c = 0; c < w->channels; c++)
        if (!(b->units[c] = bl_strdup(unit))) goto nomem;
    info->channels = w->channels;
    info->frames = (int64_t)dims[0];
    snprintf(info->format, sizeof info->format, "NWB %.50s", where);
    H5Gclose(series);
    b->impl = w;
    b->read = nwb_read;
    b->close = nwb_close;
    return BL_OK;
nomem:
    st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
fail:
    bl_trace_strings_free(b->names, w->channels);
    bl_trace_strings_free(b->units, w->channels);
    b->names = b->units = NULL;
    if (series >= 0) H5Gclose(series);
    nwb_close(w);
    return st;
}
