/* BrainVision recordings: a text header (.vhdr) naming a binary data file (.eeg) and a marker file (.vmrk).
 * Source: Brain Products, "Brain Vision Data Exchange Format" (header file version 1.0): the
 * [Common Infos] keys DataFile, DataFormat (BINARY), DataOrientation (MULTIPLEXED = samples interleaved
 * by channel, VECTORIZED = each channel's samples contiguous), NumberOfChannels, SamplingInterval in
 * microseconds; [Binary Infos] BinaryFormat INT_16, INT_32 or IEEE_FLOAT_32, little-endian; [Channel Infos]
 * Ch<n>=<name>,<reference>,<resolution>,<unit> with "\1" standing for a comma in names, an empty resolution
 * meaning 1 and an absent unit meaning microvolts; physical value = stored value * resolution.
 */
#include "signal/trace_backend.h"
#include "core/strutil.h"

#include <ctype.h>
#include <errno.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <strings.h>
#include <sys/stat.h>

typedef enum { BV_INT16, BV_INT32, BV_FLOAT32 } bv_type;

typedef struct {
    FILE *f;
    char *data_path;
    size_t channels;
    int64_t frames;
    int vectorized;
    bv_type type;
    size_t bytes;       /* per sample */
    double *resolution; /* per channel */
    unsigned char *buf;
    size_t buf_cap;
} bv_file;

static void bv_close(void *impl)
{
    bv_file *v = impl;
    if (!v) return;
    if (v->f) fclose(v->f);
    free(v->data_path);
    free(v->resolution);
    free(v->buf);
    free(v);
}

static double decode(const unsigned char *p, bv_type type)
{
    switch (type) {
    case BV_INT16: return (double)(int16_t)(uint16_t)(p[0] | (p[1] << 8));
    case BV_INT32: {
        uint32_t u = (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
        return (double)(int32_t)u;
    }
    default: {
        uint32_t u = (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
        float x;
        memcpy(&x, &u, sizeof x);
        return (double)x;
    }
    }
}

static bl_status read_at(bv_file *v, int64_t sample, size_t count, bl_error *err)
{
    size_t need = count * v->bytes;
    if (need > v->buf_cap) {
        unsigned char *nb = realloc(v->buf, need);
        if (!nb) return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory for a window", v->data_path);
        v->buf = nb;
        v->buf_cap = need;
    }
    if (fseeko(v->f, (off_t)(sample * (int64_t)v->bytes), SEEK_SET) != 0)
        return bl_error_set(err, BL_ERR_IO, "%s: cannot seek to byte %lld: %s", v->data_path,
                            (long long)(sample * (int64_t)v->bytes), strerror(errno));
    size_t got = fread(v->buf, 1, need, v->f);
    if (got != need)
        return bl_error_set(err, BL_ERR_IO, "%s: read %zu of %zu bytes at byte %lld; the file is truncated or damaged",
                            v->data_path, got, need, (long long)(sample * (int64_t)v->bytes));
    return BL_OK;
}

static bl_status bv_read(void *impl, int64_t start, size_t n, double *buf, bl_error *err)
{
    bv_file *v = impl;
    size_t ch = v->channels;
    bl_status st;
    if (!v->vectorized) {
        if ((st = read_at(v, start * (int64_t)ch, n * ch, err))) return st;
        for (size_t i = 0; i < n * ch; i++) buf[i] = decode(v->buf + i * v->bytes, v->type) * v->resolution[i % ch];
        return BL_OK;
    }
    for (size_t c = 0; c < ch; c++) {
        if ((st = read_at(v, (int64_t)c * v->frames + start, n, err))) return st;
        for (size_t i = 0; i < n; i++) buf[i * ch + c] = decode(v->buf + i * v->bytes, v->type) * v->resolution[c];
    }
    return BL_OK;
}

/* The header's keys, by section; values point into the loaded text. */
typedef struct {
    char *data_file, *format, *orientation, *n_channels, *interval, *binary;
    char **ch; /* Ch1.. entries, index n-1 */
    size_t *ch_line;
    size_t n_ch;
} bv_header;

static char *trim(char *s)
{
    while (*s == ' ' || *s == '\t') s++;
    size_t n = strlen(s);
    while (n > 0 && (s[n - 1] == ' ' || s[n - 1] == '\t' || s[n - 1] == '\r')) s[--n] = '\0';
    return s;
}

/* Split the header into its keys; `text` is modified in place. */
static bl_status parse_header(const char *path, char *text, bv_header *h, bl_error *err)
{
    char section[64] = "";
    size_t lineno = 0, cap = 0;
    char *save = NULL;
    for (char *line = strtok_r(text, "\n", &save); line; line = strtok_r(NULL, "\n", &save)) {
        lineno++;
        char *s = trim(line);
        if (lineno == 1) {
            if (strstr(s, "Vision Data Exchange Header File") == NULL)
                return bl_error_set(err, BL_ERR_INPUT,
                                    "%s:1: not a BrainVision header (the first line should name the "
                                    "\"Brain Vision Data Exchange Header File\")",
                                    path);
            continue;
        }
        if (!*s || *s == ';') continue;
        if (*s == '[') {
            snprintf(section, sizeof section, "%s", s);
            continue;
        }
        char *eq = strchr(s, '=');
        if (!eq) continue;
        *eq = '\0';
        char *key = trim(s), *val = trim(eq + 1);
        if (strcmp(section, "[Common Infos]") == 0) {
            if (strcmp(key, "DataFile") == 0) h->data_file = val;
            else if (strcmp(key, "DataFormat") == 0) h->format = val;
            else if (strcmp(key, "DataOrientation") == 0) h->orientation = val;
            else if (strcmp(key, "NumberOfChannels") == 0) h->n_channels = val;
            else if (strcmp(key, "SamplingInterval") == 0) h->interval = val;
        } else if (strcmp(section, "[Binary Infos]") == 0) {
            if (strcmp(key, "BinaryFormat") == 0) h->binary = val;
        } else if (strcmp(section, "[Channel Infos]") == 0 && strncmp(key, "Ch", 2) == 0) {
            char *end;
            long k = strtol(key + 2, &end, 10);
            if (end == key + 2 || *end || k < 1 || k > 100000)
                return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: [Channel Infos] key \"%s\" is not Ch<number>", path,
                                    lineno, key);
            if ((size_t)k > cap) {
                size_t nc = (size_t)k > 2 * cap ? (size_t)k : 2 * cap;
                char **nch = realloc(h->ch, nc * sizeof *nch);
                if (nch) h->ch = nch;
                size_t *nl = nch ? realloc(h->ch_line, nc * sizeof *nl) : NULL;
                if (!nch || !nl) return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
                h->ch_line = nl;
                for (size_t i = cap; i < nc; i++) h->ch[i] = NULL;
                cap = nc;
            }
            if (h->ch[k - 1])
                return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: [Channel Infos] key \"%s\" appears twice", path, lineno,
                                    key);
            h->ch[k - 1] = val;
            h->ch_line[k - 1] = lineno;
            if ((size_t)k > h->n_ch) h->n_ch = (size_t)k;
        }
    }
    return BL_OK;
}

/* Ch<n>=<name>,<reference>,<resolution>,<unit> into the backend's name/unit and the resolution. */
static bl_status parse_channel(const char *path, bv_header *h, size_t c, bv_file *v, bl_trace_backend *b, bl_error *err)
{
    char *fields[4] = {NULL, NULL, NULL, NULL};
    char *p = h->ch[c];
    for (int k = 0; k < 4 && p; k++) {
        fields[k] = p;
        char *comma = strchr(p, ',');
        if (comma) *comma = '\0';
        p = comma ? comma + 1 : NULL;
    }
    char *name = fields[0];
    for (char *q = name; *q; q++) /* "\1" stands for a comma inside the name */
        if (q[0] == '\\' && q[1] == '1') {
            *q = ',';
            memmove(q + 1, q + 2, strlen(q + 2) + 1);
        }
    if (!*trim(name))
        return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: [Channel Infos] Ch%zu has no name", path, h->ch_line[c], c + 1);
    for (size_t j = 0; j < c; j++)
        if (strcmp(b->names[j], trim(name)) == 0)
            return bl_error_set(err, BL_ERR_INPUT, "%s:%zu: [Channel Infos] Ch%zu is named \"%s\", like Ch%zu", path,
                                h->ch_line[c], c + 1, trim(name), j + 1);
    double res = 1.0;
    if (fields[2] && *trim(fields[2])) {
        char *end;
        res = strtod(trim(fields[2]), &end);
        if (*end || !isfinite(res) || res == 0)
            return bl_error_set(err, BL_ERR_INPUT,
                                "%s:%zu: [Channel Infos] Ch%zu resolution \"%s\" is not a non-zero "
                                "number",
                                path, h->ch_line[c], c + 1, fields[2]);
    }
    v->resolution[c] = res;
    const char *unit = fields[3] && *trim(fields[3]) ? trim(fields[3]) : "\xc2\xb5V";
    if (!(b->names[c] = bl_strdup(trim(name))) || !(b->units[c] = bl_strdup(unit)))
        return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
    return BL_OK;
}

static bl_status load_text(const char *path, char **out, bl_error *err)
{
    *out = NULL;
    FILE *f = fopen(path, "rb");
    if (!f)
        return bl_error_set(err, bl_status_from_errno(errno), "%s: cannot open the recording: %s", path,
                            strerror(errno));
    size_t cap = 4096, len = 0;
    char *t = malloc(cap);
    for (;;) {
        if (!t) {
            fclose(f);
            return bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
        }
        len += fread(t + len, 1, cap - len - 1, f);
        if (len < cap - 1 || cap > (64u << 20)) break;
        cap *= 2;
        char *nt = realloc(t, cap);
        if (!nt) free(t);
        t = nt;
    }
    int bad = ferror(f);
    fclose(f);
    t[len] = '\0';
    if (bad) {
        free(t);
        return bl_error_set(err, BL_ERR_IO, "%s: read error", path);
    }
    *out = t;
    return BL_OK;
}

static bl_status check_header(const char *path, const bv_header *h, bv_file *v, double *rate, bl_error *err)
{
    if (!h->data_file || !*h->data_file)
        return bl_error_set(err, BL_ERR_INPUT, "%s: [Common Infos] has no DataFile", path);
    if (h->format && strcasecmp(h->format, "BINARY") != 0)
        return bl_error_set(err, BL_ERR_INPUT, "%s: [Common Infos] DataFormat is \"%s\"; only BINARY is read", path,
                            h->format);
    if (!h->orientation || strcasecmp(h->orientation, "MULTIPLEXED") == 0) v->vectorized = 0;
    else if (strcasecmp(h->orientation, "VECTORIZED") == 0) v->vectorized = 1;
    else
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: [Common Infos] DataOrientation is \"%s\"; MULTIPLEXED or VECTORIZED "
                            "is expected",
                            path, h->orientation);
    char *end;
    long nch = h->n_channels ? strtol(h->n_channels, &end, 10) : 0;
    if (!h->n_channels || *end || nch < 1)
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: [Common Infos] NumberOfChannels is \"%s\"; a whole number >= 1 is needed", path,
                            h->n_channels ? h->n_channels : "(missing)");
    v->channels = (size_t)nch;
    double us = h->interval ? strtod(h->interval, &end) : 0;
    if (!h->interval || *end || !(us > 0) || !isfinite(us))
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: [Common Infos] SamplingInterval is \"%s\"; microseconds > 0 are needed", path,
                            h->interval ? h->interval : "(missing)");
    *rate = 1e6 / us;
    const char *bin = h->binary ? h->binary : "(missing)";
    if (strcasecmp(bin, "INT_16") == 0) v->type = BV_INT16, v->bytes = 2;
    else if (strcasecmp(bin, "INT_32") == 0) v->type = BV_INT32, v->bytes = 4;
    else if (strcasecmp(bin, "IEEE_FLOAT_32") == 0) v->type = BV_FLOAT32, v->bytes = 4;
    else
        return bl_error_set(err, BL_ERR_INPUT,
                            "%s: [Binary Infos] BinaryFormat is \"%s\"; INT_16, INT_32 or IEEE_FLOAT_32 "
                            "is expected",
                            path, bin);
    if (h->n_ch != v->channels)
        return bl_error_set(err, BL_ERR_INPUT, "%s: NumberOfChannels is %zu but [Channel Infos] lists Ch1 to Ch%zu",
                            path, v->channels, h->n_ch);
    for (size_t c = 0; c < h->n_ch; c++)
        if (!h->ch[c]) return bl_error_set(err, BL_ERR_INPUT, "%s: [Channel Infos] has no Ch%zu", path, c + 1);
    return BL_OK;
}

bl_status bl_trace_brainvision_open(const char *path, bl_trace_info *info, bl_trace_backend *b, bl_error *err)
{
    char *text = NULL;
    bv_header h = {0};
    bl_status st;
    bv_file *v = calloc(1, sizeof *v);
    if (!v) return bl_error_set(err, BL_ERR_NOMEM, "out of memory opening %s", path);
    double rate = 0;
    if ((st = load_text(path, &text, err)) || (st = parse_header(path, text, &h, err)) ||
        (st = check_header(path, &h, v, &rate, err)))
        goto fail;
    if (!(v->resolution = calloc(v->channels, sizeof *v->resolution)) ||
        !(b->names = calloc(v->channels, sizeof *b->names)) || !(b->units = calloc(v->channels, sizeof *b->units))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
        goto fail;
    }
    for (size_t c = 0; c < v->channels; c++)
        if ((st = parse_channel(path, &h, c, v, b, err))) goto fail;
    /* DataFile is relative to the header's folder */
    const char *slash = strrchr(path, '/');
    size_t dir = slash && h.data_file[0] != '/' ? (size_t)(slash - path + 1) : 0;
    if (!(v->data_path = malloc(dir + strlen(h.data_file) + 1))) {
        st = bl_error_set(err, BL_ERR_NOMEM, "%s: out of memory", path);
        goto fail;
    }
    memcpy(v->data_path, path, dir);
    strcpy(v->data_path + dir, h.data_file);
    if (!(v->f = fopen(v->data_path, "rb"))) {
        st = bl_error_set(err, bl_status_from_errno(errno) == BL_ERR_IO ? BL_ERR_IO : BL_ERR_INPUT,
                          "%s: DataFile \"%s\": cannot open %s: %s", path, h.data_file, v->data_path, strerror(errno));
        goto fail;
    }
    struct stat sb;
    if (fstat(fileno(v->f), &sb) != 0) {
        st = bl_error_set(err, BL_ERR_IO, "%s: cannot read the size of %s: %s", path, v->data_path, strerror(errno));
        goto fail;
    }
    size_t frame_bytes = v->channels * v->bytes;
    if (sb.st_size == 0 || (size_t)sb.st_size % frame_bytes) {
        st = bl_error_set(err, BL_ERR_INPUT,
                          "%s: DataFile %s holds %lld bytes, not a whole number of samples of %zu "
                          "channels x %zu bytes (truncated, or the header's NumberOfChannels/BinaryFormat is wrong)",
                          path, v->data_path, (long long)sb.st_size, v->channels, v->bytes);
        goto fail;
    }
    v->frames = (int64_t)((size_t)sb.st_size / frame_bytes);
    info->rate = rate;
    info->channels = v->channels;
    info->frames = v->frames;
    snprintf(info->format, sizeof info->format, "BrainVision, %s %s", h.binary,
             v->vectorized ? "vectorized" : "multiplexed");
    free(text);
    free(h.ch);
    free(h.ch_line);
    b->impl = v;
    b->read = bv_read;
    b->close = bv_close;
    return BL_OK;
fail:
    bl_trace_strings_free(b->names, v->channels);
    bl_trace_strings_free(b->units, v->channels);
    b->names = b->units = NULL;
    free(text);
    free(h.ch);
    free(h.ch_line);
    bv_close(v);
    return st;
}
