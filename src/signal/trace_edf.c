/* EDF, EDF+ (continuous) and BDF/BDF+ recordings, read one window at a time.
 * Sources: Kemp B, Värri A, Rosa AC, Nielsen KD, Gade J (1992) "A simple format for exchange of digitized
 * polygraphic recordings", Electroencephalogr Clin Neurophysiol 82:391-393 (the 256-byte header, the
 * per-signal fields, 16-bit little-endian two's complement samples in data records, physical value =
 * (digital - dmin) * (pmax - pmin) / (dmax - dmin) + pmin); Kemp B, Olivan J (2003) "European data format
 * 'plus' (EDF+)", Clin Neurophysiol 114:1755-1761 ("EDF+C"/"EDF+D" in the reserved field, the
 * "EDF Annotations" signal); BioSemi's BDF variant (first byte 0xFF then "BIOSEMI", "24BIT", 24-bit
 * little-endian samples, "BDF Annotations").
 * Own reader rather than EDFlib: errors must name the header field and value (EDFlib returns one code
 * for every format error), windows are read by seeking into the data records without a library buffer,
 * and the format is small enough to check field by field.
 */
#include "signal/trace_backend.h"
#include "core/strutil.h"

#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>

typedef struct {
    FILE *f;
    char *path;
    int bytes; /* per sample: 2 (EDF) or 3 (BDF) */
    long long header_bytes;
    size_t record_bytes;
    size_t spr;            /* samples per record of every data signal */
    size_t n_data;         /* data signals (annotation signals left out) */
    size_t *offset;        /* n_data: first sample of the signal inside a record */
    double *cal, *off;     /* n_data: physical = digital * cal + off */
    double *dmin, *dmax;   /* n_data: digital extremes (clipping) */
    unsigned char *record; /* one data record */
    long long cached;      /* record held in `record`, -1 none */
} edf_file;

/* Field text with trailing spaces removed; `out` holds len + 1 bytes. */
static void field(const unsigned char *h, size_t off, size_t len, char *out)
{
    memcpy(out, h + off, len);
    out[len] = '\0';
    while (len > 0 && (out[len - 1] == ' ' || out[len - 1] == '\0')) out[--len] = '\0';
}

static bl_status number_field(const char *path, const char *name, const char *text, double *v, bl_error *err)
{
    const char *p = text;
    while (*p == ' ') p++;
    char *end;
    errno = 0;
    *v = strtod(p, &end);
    if (end == p || *end || !isfinite(*v))
        return bl_error_set(err, BL_ERR_INPUT, "%s: EDF header field \"%s\" is \"%s\", not a number", path, name, text);
    return BL_OK;
}

static void edf_close(void *impl)
{
    edf_file *e = impl;
    if (!e) return;
    if (e->f) fclose(e->f);
    free(e->path);
    free(e->offset);
    free(e->cal);
    free(e->off);
    free(e->dmin);
    free(e->dmax);
    free(e->record);
    free(e);
}

static bl_status load_record(edf_file *e, long long r, bl_error *err)
{
    if (e->cached == r) return BL_OK;
    e->cached = -1;
    if (fseeko(e->f, (off_t)(e->header_bytes + r * (long long)e->record_bytes), SEEK_SET) != 0)
        return bl_error_set(err, BL_ERR_IO, "%s: cannot seek to data record %lld: %s", e->path, r + 1, strerror(errno));
    size_t got = fread(e->record, 1, e->record_bytes, e->f);
    if (got != e->record_bytes)
        return bl_error_set(err, BL_ERR_IO,
                            "%s: data record %lld: read %zu of %zu bytes; the file is truncated or damaged", e->path,
                            r + 1, got, e->record_bytes);
    e->cached = r;
    return BL_OK;
}

static bl_status edf_read(void *impl, int64_t start, size_t n, double *buf, bl_error *err)
{
    edf_file *e = impl;
    size_t done = 0;
    while (done < n) {
        int64_t frame = start + (int64_t)done;
        long long r = (long long)(frame / (int64_t)e->spr);
        size_t first = (size_t)(frame % (int64_t)e->spr), take = e->spr - first;
        if (take > n - done) take = n - done;
        bl_status st = load_record(e, r, err);
        if (st) return st;
        for (size_t c = 0; c < e->n_data; c++) {
            const unsigned char *p = e->record + (e->offset[c] + first) * (size_t)e->bytes;
            double *out = buf + done * e->n_data + c;
            for (size_t k = 0; k < take; k++, p += e->bytes, out += e->n_data) {
                long d;
                if (e->bytes == 2) d = (long)(int16_t)(uint16_t)(p[0] | (p[1] << 8));
                else {
                    d = (long)p[0] | ((long)p[1] << 8) | ((long)p[2] << 16);
                    if (d & 0x800000L) d -= 0x1000000L;
                }
                *out = (double)d * e->cal[c] + e->off[c];
            }
        }
        done += take;
    }
    return BL_OK;
}

/* Per-signal header fields, in the order the specification stores them (ns entries each). */
enum { F_LABEL, F_TRANSDUCER, F_DIM, F_PMIN, F_PMAX, F_DMIN, F_DMAX, F_PREFILTER, F_SPR, F_RESERVED, F_COUNT };
static const size_t field_len[F_COUNT] = {16, 80, 8, 8, 8, 8, 8, 80, 8, 32};
static const char *const field_name[F_COUNT] = {
    "label",           "transducer type", "physical dimension", "physical minimum",        "physical maximum",
    "digital minimum", "digital maximum", "prefiltering",       "samples per data record", "reserved"};

static int is_annotation(const char *label)
{
    return strcmp(label, "EDF Annotations") == 0 || strcmp(label, "BDF Annotations") == 0;
}

/* The signal headers: names, units, scaling, the record layout. */
static bl_status read_signals(edf_file *e, const unsigned char *sh, size_t ns, double duration, bl_trace_info *info,
                              bl_trace_backend *b, bl_error *err)
{
    char text[96];
    size_t at[F_COUNT], pos = 0, offset = 0;
    for (int k = 0; k < F_COUNT; k++) {
        at[k] = pos;
        pos += field_len[k] * ns;
    }
    if (!(e->offset = calloc(ns, sizeof *e->offset)) || !(e->cal = calloc(ns, sizeof *e->cal)) ||
        !(e->off = calloc(ns, sizeof *e->off)) || !(e->dmin = calloc(ns, sizeof *e->dmin)) ||
        !(e->dmax = calloc(ns, sizeof *e->dmax)) || !(b->names = calloc(ns, sizeof *b->names)) ||
        !(b->units = calloc(ns, sizeof *b->units)))
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the header", e->path);
    size_t first_spr_signal = 0;
    for (size_t s = 0; s < ns; s++) {
        char label[17];
        field(sh, at[F_LABEL] + s * 16, 16, label);
        double v[F_COUNT] = {0};
        for (int k = F_PMIN; k <= F_DMAX; k++) {
            field(sh, at[k] + s * 8, 8, text);
            char name[96];
            snprintf(name, sizeof name, "%s of signal %zu", field_name[k], s + 1);
            if (number_field(e->path, name, text, &v[k], err)) return BL_ERR_INPUT;
        }
        field(sh, at[F_SPR] + s * 8, 8, text);
        double spr;
        char sname[96];
        snprintf(sname, sizeof sname, "samples per data record of signal %zu", s + 1);
        if (number_field(e->path, sname, text, &spr, err)) return BL_ERR_INPUT;
        if (!(spr >= 1) || spr != floor(spr) || spr > 1e8)
            return bl_error_set(err, BL_ERR_INPUT, "%s: EDF header field \"%s\" is \"%s\", not a whole number >= 1",
                                e->path, sname, text);
        size_t here = offset;
        offset += (size_t)spr;
        if (is_annotation(label)) continue;
        size_t c = e->n_data;
        if (!*label)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: EDF header field \"label of signal %zu\" is empty; every channel "
                                "needs a name",
                                e->path, s + 1);
        for (size_t j = 0; j < c; j++)
            if (strcmp(b->names[j], label) == 0)
                return bl_error_set(err, BL_ERR_INPUT,
                                    "%s: EDF header field \"label of signal %zu\" is \"%s\", which "
                                    "another signal already uses",
                                    e->path, s + 1, label);
        if (c == 0) {
            e->spr = (size_t)spr;
            first_spr_signal = s;
        } else if ((size_t)spr != e->spr)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: EDF header field \"samples per data record\": signal %zu (%s) has "
                                "%.0f, signal %zu (%s) %zu, so their rates differ (%.10g and %.10g Hz); one rate per "
                                "recording is needed",
                                e->path, s + 1, label, spr, first_spr_signal + 1, b->names[0], e->spr, spr / duration,
                                (double)e->spr / duration);
        if (v[F_DMAX] <= v[F_DMIN])
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: EDF header fields \"digital minimum/maximum of signal %zu\" are "
                                "%.17g and %.17g; the maximum must be larger",
                                e->path, s + 1, v[F_DMIN], v[F_DMAX]);
        if (v[F_PMAX] == v[F_PMIN])
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: EDF header fields \"physical minimum/maximum of signal %zu\" are "
                                "both %.17g",
                                e->path, s + 1, v[F_PMIN]);
        e->cal[c] = (v[F_PMAX] - v[F_PMIN]) / (v[F_DMAX] - v[F_DMIN]);
        e->off[c] = v[F_PMIN] - v[F_DMIN] * e->cal[c];
        e->dmin[c] = v[F_DMIN];
        e->dmax[c] = v[F_DMAX];
        e->offset[c] = here;
        field(sh, at[F_DIM] + s * 8, 8, text);
        if (!(b->names[c] = bl_strdup(label)) || !(b->units[c] = bl_strdup(text)))
            return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the header", e->path);
        e->n_data++;
    }
    if (e->n_data == 0)
        return bl_error_set(err, BL_ERR_INPUT, "%s: the EDF file holds annotations only, no signal", e->path);
    e->record_bytes = offset * (size_t)e->bytes;
    info->channels = e->n_data;
    info->rate = (double)e->spr / duration;
    return BL_OK;
}

static bl_status check_length(edf_file *e, double nrec_field, long long *nrec, bl_error *err)
{
    struct stat sb;
    if (fstat(fileno(e->f), &sb) != 0)
        return bl_error_set(err, BL_ERR_IO, "%s: cannot read the file size: %s", e->path, strerror(errno));
    long long data = (long long)sb.st_size - e->header_bytes;
    long long held = data > 0 ? data / (long long)e->record_bytes : 0;
    if (nrec_field == -1) { /* the specification's "unknown": recording was not closed properly */
        if (held < 1 || data % (long long)e->record_bytes)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s: EDF header field \"number of data records\" is -1 (unknown) and "
                                "the %lld data bytes are not a whole number of %zu-byte records",
                                e->path, data, e->record_bytes);
        *nrec = held;
        return BL_OK;
    }
    if (!(nrec_field >= 1) || nrec_field != floor(nrec_field))
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: EDF header field \"number of data records\" is %.17g; a whole number "
                            ">= 1 (or -1) is needed",
                            e->path, nrec_field);
    if (nrec_field > (double)held)
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: truncated: EDF header field \"number of data records\" says %.0f "
                            "records of %zu bytes after a %lld-byte header, but the file holds %lld complete record%s "
                            "(%lld bytes)",
                            e->path, nrec_field, e->record_bytes, e->header_bytes, held, held == 1 ? "" : "s",
                            (long long)sb.st_size);
    *nrec = (long long)nrec_field;
    return BL_OK;
}

bl_status bl_trace_edf_open(const char *path, bl_trace_info *info, bl_trace_backend *b, bl_error *err)
{
    unsigned char h[256], *sh = NULL;
    char text[96];
    bl_status st;
    size_t ns = 0;
    double hb = 0, nrec_field = 0, duration = 0, ns_d = 0;
    edf_file *e = calloc(1, sizeof *e);
    if (!e || !(e->path = bl_strdup(path))) {
        free(e);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory opening %s", path);
    }
    e->cached = -1;
    if (!(e->f = fopen(path, "rb"))) {
        st = bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open the recording: %s", path, strerror(errno));
        goto fail;
    }
    if (fread(h, 1, 256, e->f) != 256) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: shorter than the 256-byte EDF/BDF header", path);
        goto fail;
    }
    int bdf = h[0] == 0xFF && memcmp(h + 1, "BIOSEMI", 7) == 0;
    field(h, 0, 8, text);
    if (!bdf && strcmp(text, "0") != 0) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: EDF header field \"version\" is \"%.8s\"; \"0\" (EDF) or 0xFF \"BIOSEMI\" "
                          "(BDF) is expected",
                          path, text);
        goto fail;
    }
    e->bytes = bdf ? 3 : 2;
    field(h, 184, 8, text);
    if ((st = number_field(path, "number of bytes in header record", text, &hb, err))) goto fail;
    char reserved[45];
    field(h, 192, 44, reserved);
    field(h, 236, 8, text);
    if ((st = number_field(path, "number of data records", text, &nrec_field, err))) goto fail;
    field(h, 244, 8, text);
    if ((st = number_field(path, "duration of a data record", text, &duration, err))) goto fail;
    field(h, 252, 4, text);
    if ((st = number_field(path, "number of signals", text, &ns_d, err))) goto fail;
    if (!(ns_d >= 1) || ns_d != floor(ns_d) || ns_d > 100000) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: EDF header field \"number of signals\" is \"%s\"; a whole number >= 1 is "
                          "needed",
                          path, text);
        goto fail;
    }
    ns = (size_t)ns_d;
    if (hb != 256.0 * (double)(ns + 1)) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: EDF header field \"number of bytes in header record\" is %.17g, but %zu "
                          "signals need 256 * (%zu + 1) = %zu",
                          path, hb, ns, ns, 256 * (ns + 1));
        goto fail;
    }
    if (strncmp(reserved, "EDF+D", 5) == 0 || strncmp(reserved, "BDF+D", 5) == 0) {
        st = bl_error_set(
            err, BL_ERR_INPUT,
            "%s: EDF header field \"reserved\" is \"%s\": a discontinuous recording has gaps "
            "between data records, so onsets cannot be turned into samples; export it as continuous (EDF+C)",
            path, reserved);
        goto fail;
    }
    if (!(duration > 0)) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: EDF header field \"duration of a data record\" is %.17g s; it must be > 0", path,
                          duration);
        goto fail;
    }
    e->header_bytes = (long long)hb;
    if (!(sh = malloc(ns * 256))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the header", path);
        goto fail;
    }
    if (fread(sh, 1, ns * 256, e->f) != ns * 256) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: truncated header: %zu signals need %zu header bytes", path, ns,
                          256 * (ns + 1));
        goto fail;
    }
    if ((st = read_signals(e, sh, ns, duration, info, b, err))) goto fail;
    long long nrec = 0;
    if ((st = check_length(e, nrec_field, &nrec, err))) goto fail;
    if (!(b->clip_lo = malloc(e->n_data * sizeof *b->clip_lo)) ||
        !(b->clip_hi = malloc(e->n_data * sizeof *b->clip_hi))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
        goto fail;
    }
    for (size_t c = 0; c < e->n_data; c++) { /* the same expression as edf_read, so a rail sample equals it exactly */
        double a = e->dmin[c] * e->cal[c] + e->off[c], z = e->dmax[c] * e->cal[c] + e->off[c];
        b->clip_lo[c] = a < z ? a : z;
        b->clip_hi[c] = a < z ? z : a;
    }
    if (!(e->record = malloc(e->record_bytes))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory for a data record", path);
        goto fail;
    }
    info->frames = (int64_t)nrec * (int64_t)e->spr;
    info->clip_lo = info->clip_hi = NAN;
    snprintf(info->format, sizeof info->format, "%s, %d-bit",
             bdf                                 ? (strncmp(reserved, "BDF+", 4) == 0 ? "BDF+" : "BDF")
             : strncmp(reserved, "EDF+", 4) == 0 ? "EDF+"
                                                 : "EDF",
             bdf ? 24 : 16);
    free(sh);
    b->impl = e;
    b->read = edf_read;
    b->close = edf_close;
    return BL_OK;
fail:
    free(sh);
    bl_trace_strings_free(b->names, ns);
    bl_trace_strings_free(b->units, ns);
    free(b->clip_lo);
    free(b->clip_hi);
    b->clip_lo = b->clip_hi = NULL;
    b->names = b->units = NULL;
    edf_close(e);
    return st;
}
