/* Trial tables from a recording's own events: BrainVision markers (.vmrk), EDF+/BDF+ annotations (TAL) and
 * the NWB `intervals/trials` table. Each becomes a table with `onset` and `duration` in seconds from the first
 * stored sample, then its own columns.
 * Sources: Brain Products "Brain Vision Data Exchange Format" 1.0 ([Marker Infos] Mk<n>=<type>,<description>,
 * <position>,<points>,<channel>[,<date>], position 1-based in data points; SamplingInterval in the .vhdr);
 * Kemp & Olivan 2003, EDF+ section 2.2 (Time-stamped Annotations Lists: "+<onset>[\x15<duration>]\x14<text>
 * \x14...\x00" in the "EDF Annotations" signal, onsets in seconds from the file's start; the first TAL of a
 * record keeps time and has no text); NWB 2.x schema (TimeIntervals `trials`: start_time, stop_time and
 * optional columns of equal length).
 */
#include "design/events_files.h"
#include "core/strutil.h"

#include <errno.h>
#include <hdf5.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

static void tsv_field(FILE *m, const char *v, int last)
{
    for (const char *p = v ? v : "n/a"; *p; p++) fputc(*p == '\t' || *p == '\n' || *p == '\r' ? ' ' : *p, m);
    fputc(last ? '\n' : '\t', m);
}

static bl_status slurp(const char *path, char **out, size_t *len, bl_error *err)
{
    FILE *f = fopen(path, "rb");
    if (!f) return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open: %s", path, strerror(errno));
    char *buf = NULL;
    size_t cap = 0, n = 0, got;
    do {
        if (n + 65536 > cap) {
            char *nb = realloc(buf, cap = 2 * cap + 65536);
            if (!nb) {
                free(buf);
                fclose(f);
                return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
            }
            buf = nb;
        }
        got = fread(buf + n, 1, cap - n - 1, f);
        n += got;
    } while (got > 0);
    int bad = ferror(f);
    fclose(f);
    if (bad) {
        free(buf);
        return bl_error_set(err, BL_ERR_IO, "%s: read error", path);
    }
    buf[n] = '\0';
    *out = buf;
    *len = n;
    return BL_OK;
}

/* SamplingInterval (microseconds) of the .vhdr beside a .vmrk */
static bl_status vhdr_rate(const char *vmrk, double *rate, bl_error *err)
{
    size_t len = strlen(vmrk);
    char *vhdr = malloc(len + 1), *text = NULL;
    if (!vhdr) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    memcpy(vhdr, vmrk, len - 5);
    strcpy(vhdr + len - 5, ".vhdr");
    size_t n;
    bl_status st = slurp(vhdr, &text, &n, err);
    if (!st) {
        char *p = strstr(text, "\nSamplingInterval=");
        double us = p ? strtod(p + 18, NULL) : 0;
        if (!(us > 0))
            st = bl_error_set(err, BL_ERR_INPUT, "%s: no SamplingInterval > 0, needed to place the markers of %s", vhdr,
                              vmrk);
        *rate = 1e6 / us;
    }
    free(text);
    free(vhdr);
    return st;
}

static bl_status vmrk_events(const char *path, FILE *m, bl_error *err)
{
    double rate = 0;
    char *text = NULL;
    size_t n;
    bl_status st = vhdr_rate(path, &rate, err);
    if (st || (st = slurp(path, &text, &n, err))) return st;
    fputs("onset\tduration\ttrial_type\tsample\tchannel\n", m);
    int in_markers = 0;
    size_t lineno = 0;
    char *save = NULL;
    for (char *line = strtok_r(text, "\n", &save); line && !st; line = strtok_r(NULL, "\n", &save)) {
        lineno++;
        size_t l = strlen(line);
        if (l && line[l - 1] == '\r') line[--l] = '\0';
        if (line[0] == '[') in_markers = strcmp(line, "[Marker Infos]") == 0;
        if (!in_markers || strncmp(line, "Mk", 2) != 0 || !strchr(line, '=')) continue;
        char *f[6] = {0};
        char *p = strchr(line, '=') + 1;
        for (int k = 0; k < 6 && p; k++) {
            f[k] = p;
            char *c = strchr(p, ',');
            if (c) *c = '\0';
            p = c ? c + 1 : NULL;
        }
        char *end;
        double pos = f[2] ? strtod(f[2], &end) : NAN, pts = f[3] && *f[3] ? strtod(f[3], NULL) : 1;
        if (!f[2] || *end || !(pos >= 1)) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: marker position \"%s\" is not a sample number >= 1", path,
                              lineno, f[2] ? f[2] : "");
            break;
        }
        fprintf(m, "%.17g\t%.17g\t", (pos - 1) / rate, pts / rate);   /* "points": the size in samples */
        fprintf(m, "%s/%s\t%.0f\t", f[0], f[1] ? f[1] : "", pos - 1); /* "Stimulus/S  1": trials.split parts it */
        tsv_field(m, f[4] && *f[4] ? f[4] : NULL, 1);
    }
    free(text);
    return st;
}

/* Kemp & Olivan 2003: the TALs of one annotation signal's bytes in one data record. */
static bl_status tal_events(const char *path, const unsigned char *b, size_t n, long long record, FILE *m,
                            bl_error *err)
{
    size_t i = 0;
    while (i < n && b[i]) {
        size_t start = i;
        while (i < n && b[i] && b[i] != 0x14 && b[i] != 0x15) i++;
        char onset[64], dur[64] = "";
        size_t ol = i - start < sizeof onset - 1 ? i - start : sizeof onset - 1;
        memcpy(onset, b + start, ol);
        onset[ol] = '\0';
        if (i < n && b[i] == 0x15) {
            size_t ds = ++i;
            while (i < n && b[i] != 0x14) i++;
            size_t dl = i - ds < sizeof dur - 1 ? i - ds : sizeof dur - 1;
            memcpy(dur, b + ds, dl);
            dur[dl] = '\0';
        }
        char *end;
        double t = strtod(onset, &end);
        if ((onset[0] != '+' && onset[0] != '-') || *end || i >= n || b[i] != 0x14)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: data record %lld: annotation onset \"%s\" is not a TAL "
                                "(+seconds, then 0x14)",
                                path, record + 1, onset);
        i++;
        while (i < n && b[i] && b[i] != 0) { /* texts, each ended by 0x14; the TAL ends with 0x00 */
            size_t ts = i;
            while (i < n && b[i] != 0x14 && b[i]) i++;
            if (i > ts) {
                fprintf(m, "%.17g\t%s\t", t, *dur ? dur : "0");
                for (size_t k = ts; k < i; k++) fputc(b[k] == '\t' || b[k] == '\n' ? ' ' : b[k], m);
                fputc('\n', m);
            }
            if (i < n && b[i] == 0x14) i++;
        }
        if (i < n && b[i] == 0) i++;
    }
    return BL_OK;
}

static long field_long(const unsigned char *h, size_t off, size_t len)
{
    char t[16];
    memcpy(t, h + off, len);
    t[len] = '\0';
    return strtol(t, NULL, 10);
}

static bl_status edf_events(const char *path, FILE *m, bl_error *err)
{
    FILE *f = fopen(path, "rb");
    if (!f) return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open: %s", path, strerror(errno));
    unsigned char h0[256], *h = NULL, *block = NULL;
    bl_status st = BL_OK;
    long ns = 0, nrec = 0, hb = 0;
    if (fread(h0, 1, 256, f) == 256) {
        ns = field_long(h0, 252, 4);
        nrec = field_long(h0, 236, 8);
        hb = field_long(h0, 184, 8);
    }
    int bps = h0[0] == 0xFF ? 3 : 2;
    if (ns < 1 || ns > 100000 || hb != 256 * (ns + 1) || !(h = malloc((size_t)hb)) ||
        fread(h + 256, 1, (size_t)hb - 256, f) != (size_t)hb - 256) {
        st = h || ns < 1 || ns > 100000 || hb != 256 * (ns + 1)
                 ? bl_error_set(err, BL_ERR_INPUT,
                                "%s: not a readable EDF+/BDF+ header (number of signals %ld, header "
                                "bytes %ld)",
                                path, ns, hb)
                 : bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    size_t rec_bytes = 0, ann_off = 0, ann_len = 0;
    int found = 0;
    for (long s = 0; s < ns; s++) {
        char label[17];
        memcpy(label, h + 256 + 16 * s, 16);
        label[16] = '\0';
        for (int k = 15; k >= 0 && label[k] == ' '; k--) label[k] = '\0';
        long spr = field_long(h, 256 + (size_t)ns * (16 + 80 + 8 * 5 + 80) + 8 * (size_t)s, 8);
        if (spr < 1 || spr > 100000000L) { /* checked before any size is computed from it */
            st = bl_error_set(err, BL_ERR_INPUT,
                              "%s: header field \"number of samples in each data record\" of signal %ld is %ld; "
                              "it must be a whole number from 1 to 100000000",
                              path, s + 1, spr);
            goto done;
        }
        if ((strcmp(label, "EDF Annotations") == 0 || strcmp(label, "BDF Annotations") == 0) && !found) {
            found = 1;
            ann_off = rec_bytes;
            ann_len = (size_t)spr * (size_t)bps;
        }
        rec_bytes += (size_t)spr * (size_t)bps;
    }
    if (!found) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: no \"EDF Annotations\" signal, so no events (EDF+ and BDF+ files hold "
                          "them)",
                          path);
        goto done;
    }
    if (!(block = malloc(ann_len + 1))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
        goto done;
    }
    fputs("onset\tduration\ttrial_type\n", m);
    for (long r = 0; (nrec < 0 || r < nrec) && !st; r++) { /* seek to each record's annotation bytes */
        if (fseeko(f, (off_t)hb + (off_t)r * (off_t)rec_bytes + (off_t)ann_off, SEEK_SET) != 0 ||
            fread(block, 1, ann_len, f) != ann_len) {
            if (nrec >= 0)
                st = bl_error_set(err, BL_ERR_INPUT, "%s: truncated: data record %ld of %ld is missing", path, r + 1,
                                  nrec);
            break;
        }
        st = tal_events(path, block, ann_len, r, m, err);
    }
done:
    free(block);
    free(h);
    fclose(f);
    return st;
}

typedef struct {
    char names[64][128];
    size_t n;
} name_list;

static herr_t list_datasets(hid_t g, const char *name, const H5L_info_t *info, void *data)
{
    (void)info;
    name_list *l = data;
    hid_t d = l->n < 64 ? H5Dopen2(g, name, H5P_DEFAULT) : -1; /* fails quietly for groups */
    if (d >= 0) {
        snprintf(l->names[l->n++], sizeof l->names[0], "%s", name);
        H5Dclose(d);
    }
    return 0;
}

/* One 1-D column as text cells (numbers %.17g); NULL when not a 1-D column of `rows` numbers or strings. */
static char **nwb_column(hid_t g, const char *name, size_t rows)
{
    hid_t d = H5Dopen2(g, name, H5P_DEFAULT), sp = d >= 0 ? H5Dget_space(d) : -1, ft = d >= 0 ? H5Dget_type(d) : -1;
    char **cells = NULL;
    if (sp >= 0 && H5Sget_simple_extent_ndims(sp) == 1 && H5Sget_simple_extent_npoints(sp) == (hssize_t)rows &&
        (cells = calloc(rows ? rows : 1, sizeof *cells))) {
        H5T_class_t cls = H5Tget_class(ft);
        int ok = 0;
        if (cls == H5T_INTEGER || cls == H5T_FLOAT) {
            double *v = malloc((rows ? rows : 1) * sizeof *v);
            if (v && H5Dread(d, H5T_NATIVE_DOUBLE, H5S_ALL, H5S_ALL, H5P_DEFAULT, v) >= 0) {
                ok = 1;
                for (size_t i = 0; i < rows && ok; i++) {
                    char buf[40];
                    snprintf(buf, sizeof buf, "%.17g", v[i]);
                    ok = (cells[i] = bl_strdup(buf)) != NULL;
                }
            }
            free(v);
        } else if (cls == H5T_STRING && H5Tis_variable_str(ft) > 0) {
            char **v = calloc(rows ? rows : 1, sizeof *v);
            hid_t mt = H5Tcopy(H5T_C_S1);
            H5Tset_size(mt, H5T_VARIABLE);
            H5Tset_cset(mt, H5Tget_cset(ft));
            if (v && H5Dread(d, mt, H5S_ALL, H5S_ALL, H5P_DEFAULT, v) >= 0) {
                ok = 1;
                for (size_t i = 0; i < rows && ok; i++) ok = (cells[i] = bl_strdup(v[i] ? v[i] : "")) != NULL;
                H5Dvlen_reclaim(mt, sp, H5P_DEFAULT, v);
            }
            H5Tclose(mt);
            free(v);
        }
        if (!ok) {
            for (size_t i = 0; i < rows; i++) free(cells[i]);
            free(cells);
            cells = NULL;
        }
    }
    if (ft >= 0) H5Tclose(ft);
    if (sp >= 0) H5Sclose(sp);
    if (d >= 0) H5Dclose(d);
    return cells;
}

static bl_status nwb_events(const char *path, FILE *m, bl_error *err)
{
    H5Eset_auto2(H5E_DEFAULT, NULL, NULL); /* the library must not print (per thread) */
    hid_t f = H5Fis_hdf5(path) > 0 ? H5Fopen(path, H5F_ACC_RDONLY, H5P_DEFAULT) : -1;
    if (f < 0) return bl_error_set(err, BL_ERR_INPUT, "%s: cannot open as an HDF5 (NWB) file", path);
    bl_status st = BL_OK;
    hid_t g = H5Lexists(f, "/intervals", H5P_DEFAULT) > 0 && H5Lexists(f, "/intervals/trials", H5P_DEFAULT) > 0
                  ? H5Gopen2(f, "/intervals/trials", H5P_DEFAULT)
                  : -1;
    name_list l;
    l.n = 0;
    char **col[64] = {0};
    size_t rows = 0;
    if (g < 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: no intervals/trials table", path);
        goto done;
    }
    hid_t sd = H5Lexists(g, "start_time", H5P_DEFAULT) > 0 ? H5Dopen2(g, "start_time", H5P_DEFAULT) : -1;
    if (sd >= 0) {
        hid_t sp = H5Dget_space(sd);
        rows = (size_t)H5Sget_simple_extent_npoints(sp);
        H5Sclose(sp);
        H5Dclose(sd);
    }
    H5Literate(g, H5_INDEX_NAME, H5_ITER_INC, NULL, list_datasets, &l);
    int c_start = -1, c_stop = -1;
    for (size_t k = 0; k < l.n; k++) {
        size_t len = strlen(l.names[k]);
        if (strcmp(l.names[k], "id") == 0 || (len > 6 && strcmp(l.names[k] + len - 6, "_index") == 0)) continue;
        col[k] = nwb_column(g, l.names[k], rows);
        if (strcmp(l.names[k], "start_time") == 0) c_start = (int)k;
        if (strcmp(l.names[k], "stop_time") == 0) c_stop = (int)k;
    }
    if (c_start < 0 || c_stop < 0 || !col[c_start] || !col[c_stop]) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: intervals/trials needs numeric start_time and stop_time columns of "
                          "equal length",
                          path);
        goto done;
    }
    fputs("onset\tduration", m);
    for (size_t k = 0; k < l.n; k++)
        if (col[k]) fprintf(m, "\t%s", l.names[k]);
    fputc('\n', m);
    for (size_t i = 0; i < rows; i++) {
        double a = strtod(col[c_start][i], NULL), b = strtod(col[c_stop][i], NULL);
        fprintf(m, "%.17g\t%.17g", a, b - a);
        for (size_t k = 0; k < l.n; k++)
            if (col[k]) {
                fputc('\t', m);
                for (const char *p = col[k][i]; *p; p++) fputc(*p == '\t' || *p == '\n' ? ' ' : *p, m);
            }
        fputc('\n', m);
    }
done:
    for (size_t k = 0; k < 64; k++) {
        for (size_t i = 0; col[k] && i < rows; i++) free(col[k][i]);
        free(col[k]);
    }
    if (g >= 0) H5Gclose(g);
    H5Fclose(f);
    return st;
}

int bl_events_file_kind(const char *path)
{
    const char *dot = strrchr(path, '.');
    if (!dot || strchr(dot, '/')) return 0;
    if (strcasecmp(dot, ".vmrk") == 0) return 1;
    if (strcasecmp(dot, ".edf") == 0 || strcasecmp(dot, ".bdf") == 0) return 2;
    if (strcasecmp(dot, ".nwb") == 0) return 3;
    return 0;
}

bl_status bl_events_table_read(const char *path, bl_table **out, bl_error *err)
{
    *out = NULL;
    char *text = NULL;
    size_t len = 0;
    FILE *m = open_memstream(&text, &len);
    if (!m) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    int kind = bl_events_file_kind(path);
    bl_status st = kind == 1   ? vmrk_events(path, m, err)
                   : kind == 2 ? edf_events(path, m, err)
                               : nwb_events(path, m, err);
    if (fclose(m) != 0 && !st) st = bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    if (!st) st = bl_table_parse(text, len, path, out, err);
    free(text);
    return st;
}
