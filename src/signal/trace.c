/* Recordings read one window at a time: libsndfile for sound formats (sf_seek + sf_readf_double, read
 * counts checked), a small numeric reader for CSV/TSV traces. Channel montages (single, bipolar,
 * averaged) and {column} file patterns.
 * Sources: libsndfile 1.2 API documentation (sf_open, sf_seek, sf_readf_double, SFC_SET_NORM_DOUBLE
 * default on: integer PCM read as double is divided by 2^(bits-1)).
 */
#include "signal/trace.h"
#include "signal/trace_backend.h"
#include "core/strutil.h"

#include <errno.h>
#include <math.h>
#include <sndfile.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>

struct bl_trace {
    char *path;
    bl_trace_info info;
    SNDFILE *sf;
    int64_t pos;         /* the sound file's read position (frames), -1 when unknown */
    double *csv;         /* frames x channels, interleaved (CSV traces only) */
    bl_trace_backend be; /* EDF/BDF, BrainVision, NWB: a reader of its own (trace_*.c) */
    char **names;        /* channel names from the header (CSV header row or the format's), or NULL */
    size_t n_names;
};

/* The format reader chosen by extension, or NULL for libsndfile and CSV. */
typedef bl_status (*backend_open)(const char *, bl_trace_info *, bl_trace_backend *, bl_error *);
static backend_open backend_for(const char *p)
{
    const char *dot = strrchr(p, '.');
    if (!dot || strchr(dot, '/')) return NULL;
    if (strcasecmp(dot, ".edf") == 0 || strcasecmp(dot, ".bdf") == 0) return bl_trace_edf_open;
    if (strcasecmp(dot, ".vhdr") == 0) return bl_trace_brainvision_open;
    if (strcasecmp(dot, ".nwb") == 0) return bl_trace_nwb_open;
    return NULL;
}

void bl_trace_strings_free(char **s, size_t n)
{
    if (!s) return;
    for (size_t i = 0; i < n; i++) free(s[i]);
    free(s);
}

static int has_csv_extension(const char *p)
{
    const char *dot = strrchr(p, '.');
    if (!dot || strchr(dot, '/')) return 0;
    return strcmp(dot, ".csv") == 0 || strcmp(dot, ".tsv") == 0 || strcmp(dot, ".txt") == 0 ||
           strcmp(dot, ".CSV") == 0 || strcmp(dot, ".TSV") == 0 || strcmp(dot, ".TXT") == 0;
}

static void describe_format(int format, char *buf, size_t size)
{
    const char *major = "sound file";
    switch (format & SF_FORMAT_TYPEMASK) {
    case SF_FORMAT_WAV: major = "WAV"; break;
    case SF_FORMAT_WAVEX: major = "WAVE_EXTENSIBLE"; break;
    case SF_FORMAT_FLAC: major = "FLAC"; break;
    case SF_FORMAT_AIFF: major = "AIFF"; break;
    case SF_FORMAT_W64: major = "W64"; break;
    case SF_FORMAT_RF64: major = "RF64"; break;
    case SF_FORMAT_CAF: major = "CAF"; break;
    case SF_FORMAT_AU: major = "AU"; break;
    case SF_FORMAT_OGG: major = "Ogg"; break;
    default: break;
    }
    const char *sub = "encoded";
    switch (format & SF_FORMAT_SUBMASK) {
    case SF_FORMAT_PCM_S8: sub = "8-bit PCM"; break;
    case SF_FORMAT_PCM_U8: sub = "unsigned 8-bit PCM"; break;
    case SF_FORMAT_PCM_16: sub = "16-bit PCM"; break;
    case SF_FORMAT_PCM_24: sub = "24-bit PCM"; break;
    case SF_FORMAT_PCM_32: sub = "32-bit PCM"; break;
    case SF_FORMAT_FLOAT: sub = "32-bit float"; break;
    case SF_FORMAT_DOUBLE: sub = "64-bit float"; break;
    default: break;
    }
    snprintf(buf, size, "%s, %s", major, sub);
}

static int is_integer_pcm(int format)
{
    int s = format & SF_FORMAT_SUBMASK;
    return s == SF_FORMAT_PCM_S8 || s == SF_FORMAT_PCM_U8 || s == SF_FORMAT_PCM_16 || s == SF_FORMAT_PCM_24 ||
           s == SF_FORMAT_PCM_32;
}

/* The header row's fields, spaces and quotes trimmed; an empty field stays "" (unnamed). */
static char **csv_names(const char *p, char delim, size_t channels)
{
    char **names = calloc(channels, sizeof *names);
    if (!names) return NULL;
    for (size_t c = 0; c < channels; c++) {
        const char *stop = strchr(p, delim);
        size_t len = stop ? (size_t)(stop - p) : strlen(p);
        const char *a = p;
        while (len > 0 && (*a == ' ' || *a == '"')) a++, len--;
        while (len > 0 && (a[len - 1] == ' ' || a[len - 1] == '"')) len--;
        if (!(names[c] = malloc(len + 1))) {
            bl_trace_strings_free(names, channels);
            return NULL;
        }
        memcpy(names[c], a, len);
        names[c][len] = '\0';
        p = stop ? stop + 1 : p + len;
    }
    return names;
}

/* CSV/TSV trace: header row, then one numeric row per sample. */
static bl_status read_csv_trace(bl_trace *t, bl_error *err)
{
    FILE *f = fopen(t->path, "rb");
    if (!f)
        return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open the recording: %s", t->path,
                            strerror(errno));
    bl_status st = BL_OK;
    char *line = NULL;
    size_t cap = 0, frames = 0, dcap = 0, lineno = 0;
    ssize_t len;
    char delim = ',';
    size_t channels = 0;
    while ((len = getline(&line, &cap, f)) >= 0) {
        lineno++;
        while (len > 0 && (line[len - 1] == '\n' || line[len - 1] == '\r')) line[--len] = '\0';
        char *p = line;
        if (lineno == 1 && len >= 3 && (unsigned char)p[0] == 0xEF && (unsigned char)p[1] == 0xBB &&
            (unsigned char)p[2] == 0xBF)
            p += 3;
        if (!*p) continue;
        if (channels == 0) { /* header */
            if (strchr(p, '\t')) delim = '\t';
            channels = 1;
            for (char *q = p; *q; q++) channels += *q == delim;
            t->n_names = channels;
            if (!(t->names = csv_names(p, delim, channels))) {
                st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the header", t->path);
                goto done;
            }
            continue;
        }
        if (frames == dcap) {
            dcap = dcap ? 2 * dcap : 4096;
            double *nd = realloc(t->csv, dcap * channels * sizeof *nd);
            if (!nd) {
                st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory reading the recording", t->path);
                goto done;
            }
            t->csv = nd;
        }
        size_t c = 0;
        char *q = p;
        for (;;) {
            char *end;
            errno = 0;
            double x = strtod(q, &end);
            while (*end == ' ') end++;
            if (end == q || (*end && *end != delim) || c >= channels) {
                char *stop = strchr(q, delim);
                int w = stop ? (int)(stop - q) : (int)strlen(q);
                if (c >= channels)
                    st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: more fields than the %zu header columns", t->path,
                                      lineno, channels);
                else
                    st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu:%zu: '%.*s' is not a number (sample %zu, channel %zu)",
                                      t->path, lineno, (size_t)(q - line) + 1, w > 40 ? 40 : w, q, frames + 1, c + 1);
                goto done;
            }
            t->csv[frames * channels + c++] = x;
            if (!*end) break;
            q = end + 1;
        }
        if (c != channels) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s:%zu: %zu fields, but the header has %zu columns", t->path, lineno,
                              c, channels);
            goto done;
        }
        frames++;
    }
    if (ferror(f)) {
        st = bl_error_set(err, BL_ERR_IO, "%s: read error", t->path);
        goto done;
    }
    if (channels == 0 || frames == 0) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: the recording has no samples (a header row and one row per sample "
                          "are expected)",
                          t->path);
        goto done;
    }
    t->info.channels = channels;
    t->info.frames = (int64_t)frames;
done:
    free(line);
    fclose(f);
    return st;
}

bl_status bl_trace_open(const char *path, double csv_rate, bl_trace **out, bl_error *err)
{
    return bl_trace_open_series(path, csv_rate, NULL, out, err);
}

bl_status bl_trace_open_series(const char *path, double csv_rate, const char *series, bl_trace **out, bl_error *err)
{
    *out = NULL;
    bl_trace *t = calloc(1, sizeof *t);
    if (!t || !(t->path = bl_strdup(path))) {
        free(t);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory opening %s", path);
    }
    bl_status st;
    backend_open open_format = backend_for(path);
    if (open_format) {
        t->info.clip_lo = t->info.clip_hi = NAN;
        t->be.series = series;
        if ((st = open_format(path, &t->info, &t->be, err))) goto fail;
        t->names = t->be.names;
        t->n_names = t->info.channels;
        *out = t;
        return BL_OK;
    }
    if (has_csv_extension(path)) {
        if (!(csv_rate > 0)) {
            st = bl_error_set(err, BL_ERR_INPUT, "%s: a CSV/TSV trace needs recordings.rate (samples per second)",
                              path);
            goto fail;
        }
        t->info.is_csv = 1;
        t->info.rate = csv_rate;
        t->info.clip_lo = t->info.clip_hi = NAN;
        snprintf(t->info.format, sizeof t->info.format, "CSV text");
        if ((st = read_csv_trace(t, err))) goto fail;
        *out = t;
        return BL_OK;
    }
    SF_INFO si;
    memset(&si, 0, sizeof si);
    t->sf = sf_open(path, SFM_READ, &si);
    if (!t->sf) {
        /* A file that is missing or unreadable is reported from errno; one that opens but that libsndfile
         * refuses (no data chunk, zero channels or rate, too many channels, a damaged header) is bad input
         * (exit 2); only libsndfile's own allocation failure is a failure while running (exit 1). */
        int code = sf_error(NULL), e = errno;
        const char *why = sf_strerror(NULL);
        bl_status kind = code == SF_ERR_SYSTEM                              ? bl_status_from_errno(e)
                         : strstr(why, "malloc") || strstr(why, "creating") ? BL_ERR_NOMEM /* decoder set-up */
                                                                            : BL_ERR_INPUT;
        st = bl_error_set(err, kind, "%s: cannot open the recording: %s", path, why);
        goto fail;
    }
    if (si.samplerate <= 0 || si.channels <= 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: the recording reports %d Hz and %d channels", path, si.samplerate,
                          si.channels);
        goto fail;
    }
    if (si.frames <= 0) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: the recording holds no samples", path);
        goto fail;
    }
    /* libsndfile reports SF_COUNT_MAX (or nonsense from a damaged header) when the length is unknown;
     * windows cannot be checked against such a length, so refuse the file. */
    if (si.frames >= INT64_MAX / 16) {
        st = bl_error_set(err, BL_ERR_INPUT, "%s: the recording's header gives no usable length (%lld frames)", path,
                          (long long)si.frames);
        goto fail;
    }
    t->pos = 0;
    t->info.rate = si.samplerate;
    t->info.channels = (size_t)si.channels;
    t->info.frames = si.frames;
    t->info.integer_pcm = is_integer_pcm(si.format);
    t->info.clip_lo = t->info.clip_hi = NAN;
    if (t->info.integer_pcm) {
        int bits = 16;
        switch (si.format & SF_FORMAT_SUBMASK) {
        case SF_FORMAT_PCM_S8:
        case SF_FORMAT_PCM_U8: bits = 8; break;
        case SF_FORMAT_PCM_24: bits = 24; break;
        case SF_FORMAT_PCM_32: bits = 32; break;
        default: break;
        }
        double full = ldexp(1.0, bits - 1);
        t->info.clip_lo = -1.0;
        t->info.clip_hi = (full - 1.0) / full;
    }
    describe_format(si.format, t->info.format, sizeof t->info.format);
    *out = t;
    return BL_OK;
fail:
    bl_trace_close(t);
    return st;
}

const bl_trace_info *bl_trace_get_info(const bl_trace *t) { return &t->info; }

/* Fewer samples than the header promised: a system read error is a failure while running (exit 1);
 * a file that ends early or whose frames do not decode (truncated or corrupt FLAC) is bad input. */
static bl_status short_read_status(bl_trace *t) { return sf_error(t->sf) == SF_ERR_SYSTEM ? BL_ERR_IO : BL_ERR_INPUT; }

const char *bl_trace_channel_name(const bl_trace *t, size_t c)
{
    return t->names && c < t->info.channels && t->names[c][0] ? t->names[c] : NULL;
}
int bl_trace_channel_clip(const bl_trace *t, size_t c, double *lo, double *hi)
{
    if (c >= t->info.channels) return 0;
    if (t->be.clip_lo) {
        *lo = t->be.clip_lo[c];
        *hi = t->be.clip_hi[c];
        return 1;
    }
    *lo = t->info.clip_lo;
    *hi = t->info.clip_hi;
    return t->info.integer_pcm;
}
const char *bl_trace_channel_unit(const bl_trace *t, size_t c)
{
    return t->be.units && c < t->info.channels ? t->be.units[c] : NULL;
}
const char *bl_trace_path(const bl_trace *t) { return t->path; }

bl_status bl_trace_read(bl_trace *t, int64_t start, size_t n, double *buf, bl_error *err)
{
    if (start < 0 || (int64_t)n > t->info.frames - start)
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: samples %lld to %.0f are outside the recording (%lld samples = %.6g s at %.10g Hz)",
                            t->path, (long long)start, (double)start + (double)n - 1, (long long)t->info.frames,
                            (double)t->info.frames / t->info.rate, t->info.rate);
    if (t->be.read) return t->be.read(t->be.impl, start, n, buf, err);
    if (t->csv) {
        memcpy(buf, t->csv + (size_t)start * t->info.channels, n * t->info.channels * sizeof *buf);
        return BL_OK;
    }
    /* Windows usually come in increasing order. A seek in a compressed file (FLAC without a seek table)
     * searches the stream, so a short gap ahead is cheaper to decode and discard (into buf) than to seek. */
    int64_t gap = start - t->pos;
    if (t->pos >= 0 && gap >= 0 && gap <= (int64_t)(4 * n + 65536)) {
        while (gap > 0) {
            sf_count_t step = gap < (int64_t)n ? (sf_count_t)gap : (sf_count_t)n;
            sf_count_t got = sf_readf_double(t->sf, buf, step);
            if (got != step) {
                t->pos = -1;
                return bl_error_set(err, short_read_status(t),
                                    "%s: read %lld of %lld samples at sample %lld; the file is truncated or "
                                    "damaged (%s)",
                                    t->path, (long long)got, (long long)step, (long long)(start - gap),
                                    sf_strerror(t->sf));
            }
            gap -= step;
        }
    } else if (sf_seek(t->sf, start, SEEK_SET) != start) {
        t->pos = -1;
        return bl_error_set(err, short_read_status(t), "%s: cannot seek to sample %lld: %s", t->path, (long long)start,
                            sf_strerror(t->sf));
    }
    sf_count_t got = sf_readf_double(t->sf, buf, (sf_count_t)n);
    if (got != (sf_count_t)n) {
        t->pos = -1;
        return bl_error_set(err, short_read_status(t),
                            "%s: read %lld of %zu samples at sample %lld; the file is truncated or damaged (%s)",
                            t->path, (long long)got, n, (long long)start, sf_strerror(t->sf));
    }
    t->pos = start + (int64_t)n;
    return BL_OK;
}

void bl_trace_close(bl_trace *t)
{
    if (!t) return;
    if (t->sf) sf_close(t->sf);
    if (t->be.close) t->be.close(t->be.impl);
    bl_trace_strings_free(t->names, t->n_names);
    if (t->be.units) bl_trace_strings_free(t->be.units, t->info.channels);
    free(t->be.clip_lo);
    free(t->be.clip_hi);
    free(t->csv);
    free(t->path);
    free(t);
}

/* ---- montage ---- */

static int parse_channel(const char *s, const char **end)
{
    long v = 0;
    const char *p = s;
    if (*p < '0' || *p > '9') return -1;
    while (*p >= '0' && *p <= '9') {
        v = v * 10 + (*p - '0');
        if (v > 100000) return -1;
        p++;
    }
    *end = p;
    return v >= 1 ? (int)v : -1;
}

bl_status bl_montage_parse(const char *const *specs, size_t n, const char *key, bl_montage **out, bl_error *err)
{
    *out = NULL;
    if (n == 0) return bl_error_set(err, BL_ERR_INPUT, "key \"%s\": at least one channel is needed", key);
    bl_montage *m = calloc(1, sizeof *m);
    if (!m || !(m->pos = malloc(n * sizeof *m->pos)) || !(m->neg = malloc(n * sizeof *m->neg))) {
        bl_montage_destroy(m);
        return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    }
    m->n = n;
    for (size_t i = 0; i < n; i++) {
        const char *s = specs[i], *e;
        int a = parse_channel(s, &e), b = -1;
        if (a > 0 && *e == '-') {
            const char *e2;
            b = parse_channel(e + 1, &e2);
            e = b > 0 ? e2 : e;
            if (b < 0) a = -1;
        }
        if ((a < 0 || *e) && strpbrk(s, "0123456789-") != s && *s) { /* a name: looked up per recording */
            if (!m->name && !(m->name = calloc(n, sizeof *m->name))) {
                bl_montage_destroy(m);
                return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            }
            if (!(m->name[i] = bl_strdup(s))) {
                bl_montage_destroy(m);
                return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            }
            m->pos[i] = m->neg[i] = -1;
            continue;
        }
        if (a < 0 || *e) {
            bl_montage_destroy(m);
            return bl_error_set(
                err, BL_ERR_INPUT,
                "key \"%s[%zu]\": \"%s\" is not a channel (1-based number \"3\", bipolar pair \"1-2\", or a "
                "name \"Cz\", \"Cz-Pz\")",
                key, i, s);
        }
        if (a == b) {
            bl_montage_destroy(m);
            return bl_error_set(err, BL_ERR_INPUT, "key \"%s[%zu]\": \"%s\" subtracts a channel from itself", key, i,
                                s);
        }
        m->pos[i] = a - 1;
        m->neg[i] = b > 0 ? b - 1 : -1;
    }
    *out = m;
    return BL_OK;
}

int bl_montage_max_channel(const bl_montage *m)
{
    int mx = 0;
    for (size_t i = 0; i < m->n; i++) {
        if (m->pos[i] + 1 > mx) mx = m->pos[i] + 1;
        if (m->neg[i] + 1 > mx) mx = m->neg[i] + 1;
    }
    return mx;
}

void bl_montage_apply(const bl_montage *m, const double *x, size_t frames, size_t channels, double gain, double *out)
{
    double scale = gain / (double)m->n;
    if (m->wpos) { /* resolved per recording: each channel has its own multiplier */
        for (size_t f = 0; f < frames; f++) {
            const double *row = x + f * channels;
            double s = 0;
            for (size_t i = 0; i < m->n; i++)
                s += m->neg[i] >= 0 ? m->wpos[i] * row[m->pos[i]] - m->wneg[i] * row[m->neg[i]]
                                    : m->wpos[i] * row[m->pos[i]];
            out[f] = scale * s;
        }
        return;
    }
    if (m->n == 1 && m->neg[0] < 0) {
        const double *p = x + m->pos[0];
        for (size_t f = 0; f < frames; f++) out[f] = gain * p[f * channels];
        return;
    }
    for (size_t f = 0; f < frames; f++) {
        const double *row = x + f * channels;
        double s = 0;
        for (size_t i = 0; i < m->n; i++) s += m->neg[i] >= 0 ? row[m->pos[i]] - row[m->neg[i]] : row[m->pos[i]];
        out[f] = scale * s;
    }
}

void bl_montage_destroy(bl_montage *m)
{
    if (!m) return;
    if (m->name)
        for (size_t i = 0; i < m->n; i++) free(m->name[i]);
    free(m->name);
    free(m->wpos);
    free(m->wneg);
    free(m->pos);
    free(m->neg);
    free(m);
}

/* ---- {column} patterns ---- */

bl_status bl_pattern_expand(const char *pattern, const bl_table *table, size_t row, char **out, bl_error *err)
{
    *out = NULL;
    size_t cap = strlen(pattern) + 64, len = 0;
    char *r = malloc(cap);
    if (!r) return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
    for (const char *p = pattern; *p;) {
        const char *piece = p;
        size_t plen = 1;
        if (*p == '{') {
            const char *close = strchr(p, '}');
            if (!close) {
                free(r);
                return bl_error_set(err, BL_ERR_INPUT, "key \"recordings.file\": \"%s\" has a '{' without '}'",
                                    pattern);
            }
            char name[256];
            size_t nl = (size_t)(close - p - 1);
            if (nl == 0 || nl >= sizeof name) {
                free(r);
                return bl_error_set(err, BL_ERR_INPUT,
                                    "key \"recordings.file\": \"%s\" has an empty or too long {column}", pattern);
            }
            memcpy(name, p + 1, nl);
            name[nl] = '\0';
            int c = bl_table_find(table, name);
            if (c < 0) {
                free(r);
                return bl_error_set(err, BL_ERR_INPUT,
                                    "key \"recordings.file\": \"%s\" names column {%s}, which is not in %s", pattern,
                                    name, table->path ? table->path : "the trial table");
            }
            piece = table->cols[c].text[row];
            if (!piece) {
                free(r);
                return bl_error_set(err, BL_ERR_INPUT,
                                    "%s:%zu: column \"%s\" is missing but recordings.file \"%s\" needs it",
                                    table->path ? table->path : "trials", table->line[row], name, pattern);
            }
            /* bids_recording is the relative path the BIDS scan found (design/trial_files.c): '/' allowed, '..' not */
            int nested = strcmp(name, "bids_recording") == 0 && !strstr(piece, "..") && piece[0] != '/';
            if ((strchr(piece, '/') && !nested) || strcmp(piece, "..") == 0) {
                free(r);
                return bl_error_set(
                    err, BL_ERR_INPUT,
                    "%s:%zu: column \"%s\" value \"%s\" contains '/' or is '..'; it cannot fill a file name",
                    table->path ? table->path : "trials", table->line[row], name, piece);
            }
            plen = strlen(piece);
            p = close + 1;
        } else {
            p++;
        }
        if (len + plen + 1 > cap) {
            cap = 2 * (len + plen + 1);
            char *nr = realloc(r, cap);
            if (!nr) {
                free(r);
                return bl_error_set(err, BL_ERR_NOMEM, "out of memory");
            }
            r = nr;
        }
        memcpy(r + len, piece, plen);
        len += plen;
    }
    r[len] = '\0';
    /* Filled values may each be harmless ("." and ".") yet join into ".." across adjacent placeholders:
     * the part of the path after the pattern's fixed folder must not climb out of that folder (which is
     * inside the study folder when recordings.file is a relative path). */
    const char *brace = strchr(pattern, '{');
    if (brace) {
        size_t fixed = 0;
        for (const char *q = pattern; q < brace; q++)
            if (*q == '/') fixed = (size_t)(q - pattern) + 1;
        long depth = 0;
        for (const char *c = r + fixed; *c;) {
            const char *e = strchr(c, '/');
            size_t cl = e ? (size_t)(e - c) : strlen(c);
            if (cl == 2 && c[0] == '.' && c[1] == '.') depth--;
            else if (!(cl == 0 || (cl == 1 && c[0] == '.'))) depth++;
            if (depth < 0) {
                bl_status st = bl_error_set(
                    err, BL_ERR_INPUT,
                    "%s:%zu: recordings.file \"%s\" filled from this row is \"%s\", which leads "
                    "out of the folder \"%.*s\" (adjacent values make '..')",
                    table->path ? table->path : "trials", table->line[row], pattern, r, (int)(fixed ? fixed : 1),
                    fixed ? pattern : ".");
                free(r);
                return st;
            }
            c += cl + (e != NULL);
        }
    }
    *out = r;
    return BL_OK;
}
