#define _GNU_SOURCE /* mkstemp, fchmod, strdup, gmtime_r, M_PI */
#include "plot.h"

#include "../dlfuncs.h"
#include "outfile.h"

#include <cairo-pdf.h>
#include <cairo-svg.h>
#include <cairo.h>
#include <dlfcn.h>
#include <errno.h>
#include <fontconfig/fontconfig.h>
#include <jansson.h>
#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/stat.h>
#include <time.h>
#include <unistd.h>

/* cairo (and fontconfig behind it) is loaded when the first figure is
 * started, not linked: linked, it cost every command about 2.5 ms of
 * start-up and 2 MiB for libraries only figures use (X11, fontconfig,
 * freetype, pixman, png). The library is kept for the process's life, as
 * a linked one would be. */
#define CAIRO_FUNCS(X)                                                                             \
    X(cairo_arc)                                                                                   \
    X(cairo_clip)                                                                                  \
    X(cairo_close_path)                                                                            \
    X(cairo_create)                                                                                \
    X(cairo_debug_reset_static_data)                                                               \
    X(cairo_destroy)                                                                               \
    X(cairo_fill)                                                                                  \
    X(cairo_fill_preserve)                                                                         \
    X(cairo_font_options_create)                                                                   \
    X(cairo_font_options_destroy)                                                                  \
    X(cairo_font_options_set_hint_metrics)                                                         \
    X(cairo_image_surface_create)                                                                  \
    X(cairo_line_to)                                                                               \
    X(cairo_move_to)                                                                               \
    X(cairo_new_path)                                                                              \
    X(cairo_paint)                                                                                 \
    X(cairo_pdf_surface_create_for_stream)                                                         \
    X(cairo_pdf_surface_set_metadata)                                                              \
    X(cairo_rectangle)                                                                             \
    X(cairo_restore)                                                                               \
    X(cairo_rotate)                                                                                \
    X(cairo_save)                                                                                  \
    X(cairo_select_font_face)                                                                      \
    X(cairo_set_dash)                                                                              \
    X(cairo_set_font_options)                                                                      \
    X(cairo_set_font_size)                                                                         \
    X(cairo_set_line_cap)                                                                          \
    X(cairo_set_line_join)                                                                         \
    X(cairo_set_line_width)                                                                        \
    X(cairo_set_source_rgb)                                                                        \
    X(cairo_set_source_rgba)                                                                       \
    X(cairo_show_text)                                                                             \
    X(cairo_status)                                                                                \
    X(cairo_status_to_string)                                                                      \
    X(cairo_stroke)                                                                                \
    X(cairo_surface_destroy)                                                                       \
    X(cairo_surface_finish)                                                                        \
    X(cairo_surface_status)                                                                        \
    X(cairo_surface_write_to_png_stream)                                                           \
    X(cairo_svg_surface_create_for_stream)                                                         \
    X(cairo_text_extents)                                                                          \
    X(cairo_text_path)                                                                             \
    X(cairo_translate)

#define CAIRO_LIBRARY "libcairo.so.2"
#define FONTCONFIG_LIBRARY "libfontconfig.so.1"

#define CAIRO_POINTER(name) __typeof__(name) *name;
static struct {
    void *lib;
    CAIRO_FUNCS(CAIRO_POINTER)
    __typeof__(FcFini) *FcFini;
} cx;
#undef CAIRO_POINTER

#define CAIRO_SLOT(name) {#name, (void **)&cx.name},
static const struct dl_func cairo_funcs[] = {CAIRO_FUNCS(CAIRO_SLOT)};
#undef CAIRO_SLOT

/* Loads cairo once; 0, or -1 with the reason in why. */
static int cairo_load(char *why, size_t cap)
{
    if (cx.lib)
        return 0;
    if (dl_funcs_load(CAIRO_LIBRARY, cairo_funcs, sizeof cairo_funcs / sizeof *cairo_funcs, &cx.lib,
                      why, cap) != 0)
        return -1;
    /* cairo's own fontconfig (already mapped by cairo: this only finds it) */
    void *fc = dlopen(FONTCONFIG_LIBRARY, RTLD_NOW | RTLD_LOCAL);
    if (fc)
        *(void **)&cx.FcFini = dlsym(fc, "FcFini");
    return 0;
}

/* Every cairo call below goes through the table. */
#define cairo_arc cx.cairo_arc
#define cairo_clip cx.cairo_clip
#define cairo_close_path cx.cairo_close_path
#define cairo_create cx.cairo_create
#define cairo_debug_reset_static_data cx.cairo_debug_reset_static_data
#define cairo_destroy cx.cairo_destroy
#define cairo_fill cx.cairo_fill
#define cairo_fill_preserve cx.cairo_fill_preserve
#define cairo_font_options_create cx.cairo_font_options_create
#define cairo_font_options_destroy cx.cairo_font_options_destroy
#define cairo_font_options_set_hint_metrics cx.cairo_font_options_set_hint_metrics
#define cairo_image_surface_create cx.cairo_image_surface_create
#define cairo_line_to cx.cairo_line_to
#define cairo_move_to cx.cairo_move_to
#define cairo_new_path cx.cairo_new_path
#define cairo_paint cx.cairo_paint
#define cairo_pdf_surface_create_for_stream cx.cairo_pdf_surface_create_for_stream
#define cairo_pdf_surface_set_metadata cx.cairo_pdf_surface_set_metadata
#define cairo_rectangle cx.cairo_rectangle
#define cairo_restore cx.cairo_restore
#define cairo_rotate cx.cairo_rotate
#define cairo_save cx.cairo_save
#define cairo_select_font_face cx.cairo_select_font_face
#define cairo_set_dash cx.cairo_set_dash
#define cairo_set_font_options cx.cairo_set_font_options
#define cairo_set_font_size cx.cairo_set_font_size
#define cairo_set_line_cap cx.cairo_set_line_cap
#define cairo_set_line_join cx.cairo_set_line_join
#define cairo_set_line_width cx.cairo_set_line_width
#define cairo_set_source_rgb cx.cairo_set_source_rgb
#define cairo_set_source_rgba cx.cairo_set_source_rgba
#define cairo_show_text cx.cairo_show_text
#define cairo_status cx.cairo_status
#define cairo_status_to_string cx.cairo_status_to_string
#define cairo_stroke cx.cairo_stroke
#define cairo_surface_destroy cx.cairo_surface_destroy
#define cairo_surface_finish cx.cairo_surface_finish
#define cairo_surface_status cx.cairo_surface_status
#define cairo_surface_write_to_png_stream cx.cairo_surface_write_to_png_stream
#define cairo_svg_surface_create_for_stream cx.cairo_svg_surface_create_for_stream
#define cairo_text_extents cx.cairo_text_extents
#define cairo_text_path cx.cairo_text_path
#define cairo_translate cx.cairo_translate

enum { FMT_PNG = 0, FMT_SVG, FMT_PDF };

struct plot {
    int fmt;
    double w, h;
    double font; /* base font size */
    double lw;   /* base line width */
    cairo_surface_t *surface;
    cairo_t *cr;
    struct outfile *out; /* the one atomic writer (outfile.h) */
    FILE *tmp;           /* its stream */
    int write_failed;
    char *path;
    double ref_box[4]; /* the last reference-line label drawn (plot_ref_label_box) */
    int has_ref_box;
    struct plot_label *labels; /* plot_label's, for the axes map */
    size_t nlabels, cap_labels;
};

static int live_plots; /* plots not yet freed: the last one releases the font caches */

static const char font_family[] = "DejaVu Sans"; /* fonts-dejavu-core; fontconfig falls back */

int plot_format_of(const char *path)
{
    const char *dot = strrchr(path, '.');
    if (!dot || strchr(dot, '/'))
        return -1;
    if (strcasecmp(dot, ".png") == 0)
        return FMT_PNG;
    if (strcasecmp(dot, ".svg") == 0)
        return FMT_SVG;
    if (strcasecmp(dot, ".pdf") == 0)
        return FMT_PDF;
    return -1;
}

static cairo_status_t write_tmp(void *closure, const unsigned char *data, unsigned int len)
{
    struct plot *p = closure;
    if (fwrite(data, 1, len, p->tmp) != len) {
        p->write_failed = 1;
        return CAIRO_STATUS_WRITE_ERROR;
    }
    return CAIRO_STATUS_SUCCESS;
}

struct plot *plot_new(const char *path, int w, int h, struct pb_error *err)
{
    int fmt = plot_format_of(path);
    if (fmt < 0) {
        pb_error_set(err, PB_EUSAGE, "'%s': the plot's name must end in .png, .svg or .pdf", path);
        return NULL;
    }
    char why[256];
    if (cairo_load(why, sizeof why) != 0) {
        pb_error_set(err, PB_EOUTPUT,
                     "cannot draw '%s': cannot load the drawing library (%s); install Debian's "
                     "libcairo2",
                     path, why);
        return NULL;
    }
    struct plot *p = calloc(1, sizeof *p);
    if (!p) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        return NULL;
    }
    live_plots++;
    p->fmt = fmt;
    p->w = w;
    p->h = h;
    double side = w < h ? w : h;
    p->font = fmax(9.0, fmin(side / 58.0, 64.0));
    p->lw = p->font / 10.0;
    p->path = strdup(path);
    if (!p->path) {
        pb_error_set(err, PB_ENOMEM, "out of memory");
        plot_free(p);
        return NULL;
    }
    p->out = outfile_open(path, err);
    if (!p->out) {
        plot_free(p);
        return NULL;
    }
    p->tmp = outfile_fp(p->out);
    if (fmt == FMT_PNG)
        p->surface = cairo_image_surface_create(CAIRO_FORMAT_ARGB32, w, h);
    else if (fmt == FMT_SVG)
        p->surface = cairo_svg_surface_create_for_stream(write_tmp, p, w, h);
    else
        p->surface = cairo_pdf_surface_create_for_stream(write_tmp, p, w, h);
    p->cr = cairo_create(p->surface);
    if (cairo_status(p->cr) != CAIRO_STATUS_SUCCESS) {
        pb_error_set(err, PB_ENOMEM, "cannot start the plot: %s",
                     cairo_status_to_string(cairo_status(p->cr)));
        plot_free(p);
        return NULL;
    }
    /* unhinted metrics: text widths scale with the size, so measured
     * layouts (shrink to fit, label spacing) hold in every format */
    cairo_font_options_t *fo = cairo_font_options_create();
    cairo_font_options_set_hint_metrics(fo, CAIRO_HINT_METRICS_OFF);
    cairo_set_font_options(p->cr, fo);
    cairo_font_options_destroy(fo);
    if (fmt == FMT_PDF)
        cairo_pdf_surface_set_metadata(p->surface, CAIRO_PDF_METADATA_CREATOR, "packbook");
    cairo_set_source_rgb(p->cr, 1, 1, 1);
    cairo_paint(p->cr);
    return p;
}

enum pb_code plot_finish(struct plot *p, struct pb_error *err)
{
    cairo_status_t s = cairo_status(p->cr);
    cairo_destroy(p->cr);
    p->cr = NULL;
    if (s == CAIRO_STATUS_SUCCESS && p->fmt == FMT_PNG)
        s = cairo_surface_write_to_png_stream(p->surface, write_tmp, p);
    cairo_surface_finish(p->surface);
    if (s == CAIRO_STATUS_SUCCESS)
        s = cairo_surface_status(p->surface);
    cairo_surface_destroy(p->surface);
    p->surface = NULL;
    struct outfile *out = p->out;
    p->out = NULL;
    p->tmp = NULL;
    if (s != CAIRO_STATUS_SUCCESS && !p->write_failed) {
        outfile_discard(out);
        return pb_error_set(err, PB_EOUTPUT, "cannot write '%s': %s", p->path,
                            cairo_status_to_string(s));
    }
    return outfile_commit(out, err); /* a failed write is found and said there */
}

static int plot_axes_json(FILE *out, const struct plot *p, const struct plot_panel *pa, size_t n);

enum pb_code plot_finish_map(struct plot *p, const char *map_path, const struct plot_panel *pa,
                             size_t n, struct pb_error *err)
{
    if (!map_path)
        return plot_finish(p, err);
    struct outfile *map = outfile_open(map_path, err);
    if (!map)
        return err->code;
    enum pb_code rc = PB_OK;
    if (plot_axes_json(outfile_fp(map), p, pa, n) != 0)
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the axes map '%s'", map_path);
    if (rc == PB_OK)
        rc = plot_finish(p, err);
    if (rc == PB_OK)
        return outfile_commit(map, err);
    outfile_discard(map);
    return rc;
}

void plot_free(struct plot *p)
{
    if (!p)
        return;
    live_plots--;
    if (p->cr)
        cairo_destroy(p->cr);
    if (p->surface) {
        cairo_surface_finish(p->surface);
        cairo_surface_destroy(p->surface);
    }
    outfile_discard(p->out); /* NULL once finished */
    free(p->path);
    for (size_t k = 0; k < p->nlabels; k++)
        free(p->labels[k].text);
    free(p->labels);
    free(p);
    if (live_plots == 0) {
        /* cairo's and fontconfig's caches live for the process; the tool
         * draws one or two figures, so hand them back and leak checkers
         * (ASan, valgrind) see a clean exit */
        cairo_debug_reset_static_data();
        if (cx.FcFini)
            cx.FcFini();
    }
}

double plot_height(const struct plot *p)
{
    return p->h;
}
double plot_font(const struct plot *p)
{
    return p->font;
}

int plot_parse_size(const char *arg, int *w, int *h, struct pb_error *err)
{
    char *end;
    errno = 0;
    long a = strtol(arg, &end, 10);
    long b = 0;
    int ok = end != arg && (*end == 'x' || *end == 'X') && errno == 0;
    if (ok) {
        const char *q = end + 1;
        b = strtol(q, &end, 10);
        ok = end != q && *end == '\0' && errno == 0;
    }
    if (!ok || a < PLOT_MIN_W || b < PLOT_MIN_H || a > PLOT_MAX_SIDE || b > PLOT_MAX_SIDE) {
        pb_error_set(err, PB_EUSAGE,
                     "--size: expected WIDTHxHEIGHT from %dx%d to %dx%d (pixels, or points "
                     "for SVG and PDF), got '%s'",
                     PLOT_MIN_W, PLOT_MIN_H, PLOT_MAX_SIDE, PLOT_MAX_SIDE, arg);
        return -1;
    }
    *w = (int)a;
    *h = (int)b;
    return 0;
}

static void set_font(struct plot *p, double size, int bold)
{
    cairo_select_font_face(p->cr, font_family, CAIRO_FONT_SLANT_NORMAL,
                           bold ? CAIRO_FONT_WEIGHT_BOLD : CAIRO_FONT_WEIGHT_NORMAL);
    cairo_set_font_size(p->cr, size);
}

double plot_text_width(struct plot *p, const char *text, double size, int bold)
{
    cairo_text_extents_t e;
    set_font(p, size, bold);
    cairo_text_extents(p->cr, text, &e);
    return e.x_advance;
}

static void set_rgb(struct plot *p, uint32_t rgb, double alpha)
{
    cairo_set_source_rgba(p->cr, ((rgb >> 16) & 255) / 255.0, ((rgb >> 8) & 255) / 255.0,
                          (rgb & 255) / 255.0, alpha > 0 ? alpha : 1.0);
}

static void set_style(struct plot *p, const struct plot_style *st)
{
    double w = p->lw * (st->width > 0 ? st->width : 1.0);
    set_rgb(p, st->rgb, st->alpha);
    cairo_set_line_width(p->cr, w);
    cairo_set_line_join(p->cr, CAIRO_LINE_JOIN_ROUND);
    if (st->dash == DASH_LONG) {
        double d[2] = {5.0 * w, 2.5 * w};
        cairo_set_line_cap(p->cr, CAIRO_LINE_CAP_BUTT);
        cairo_set_dash(p->cr, d, 2, 0);
    } else if (st->dash == DASH_DOT) {
        double d[2] = {0.01, 2.2 * w};
        cairo_set_line_cap(p->cr, CAIRO_LINE_CAP_ROUND);
        cairo_set_dash(p->cr, d, 2, 0);
    } else {
        cairo_set_line_cap(p->cr, CAIRO_LINE_CAP_ROUND);
        cairo_set_dash(p->cr, NULL, 0, 0);
    }
}

double plot_text(struct plot *p, double fx, double fy, int anchor, double size, int bold,
                 uint32_t rgb, const char *text)
{
    double w = plot_text_width(p, text, size, bold);
    cairo_move_to(p->cr, fx - (anchor == 1 ? w / 2 : anchor == 2 ? w : 0), fy);
    set_rgb(p, rgb, 1);
    cairo_show_text(p->cr, text);
    return w;
}

/* A colour dark enough for text on white: the palette's light members
 * (orange, yellow, sky) are fine as lines but faint as letters, so they
 * are scaled towards black until their luminance is at most 0.3. */
static uint32_t text_rgb(uint32_t rgb)
{
    double r = ((rgb >> 16) & 255) / 255.0, g = ((rgb >> 8) & 255) / 255.0, b = (rgb & 255) / 255.0;
    double lum = 0.2126 * r + 0.7152 * g + 0.0722 * b;
    if (lum <= 0.3)
        return rgb;
    double f = 0.3 / lum;
    return ((uint32_t)lround(r * f * 255) << 16) | ((uint32_t)lround(g * f * 255) << 8) |
           (uint32_t)lround(b * f * 255);
}

/* Text over data: a white halo keeps it readable over lines and grid. */
static void text_halo(struct plot *p, double fx, double fy, int anchor, double size, uint32_t rgb,
                      const char *text)
{
    double w = plot_text_width(p, text, size, 0);
    double x = fx - (anchor == 1 ? w / 2 : anchor == 2 ? w : 0);
    cairo_save(p->cr);
    cairo_new_path(p->cr);
    cairo_move_to(p->cr, x, fy);
    cairo_text_path(p->cr, text);
    cairo_set_source_rgb(p->cr, 1, 1, 1);
    cairo_set_line_width(p->cr, size * 0.3);
    cairo_set_line_join(p->cr, CAIRO_LINE_JOIN_ROUND);
    cairo_set_dash(p->cr, NULL, 0, 0);
    cairo_stroke(p->cr);
    cairo_move_to(p->cr, x, fy);
    set_rgb(p, text_rgb(rgb), 1);
    cairo_show_text(p->cr, text);
    cairo_restore(p->cr);
}

/* The ink box of text drawn from baseline fy with anchor, widened by the
 * halo: box[4] = left, top, right, bottom. */
static void text_box(struct plot *p, double fx, double fy, int anchor, double size,
                     const char *text, double box[4])
{
    cairo_text_extents_t e;
    set_font(p, size, 0);
    cairo_text_extents(p->cr, text, &e);
    double x = fx - (anchor == 1 ? e.x_advance / 2 : anchor == 2 ? e.x_advance : 0);
    double halo = size * 0.15;
    box[0] = x + fmin(e.x_bearing, 0.0) - halo;
    box[1] = fy + e.y_bearing - halo;
    box[2] = x + fmax(e.x_bearing + e.width, e.x_advance) + halo;
    box[3] = fy + e.y_bearing + e.height + halo;
}

static void note_ref_box(struct plot *p, double fx, double fy, int anchor, double size,
                         const char *text)
{
    text_box(p, fx, fy, anchor, size, text, p->ref_box);
    p->has_ref_box = 1;
}

int plot_ref_label_box(const struct plot *p, double box[4])
{
    if (!p->has_ref_box)
        return -1;
    for (int k = 0; k < 4; k++)
        box[k] = p->ref_box[k];
    return 0;
}

void plot_label_box(struct plot *p, double fx, double fy, double size, const char *text,
                    double box[4])
{
    text_box(p, fx, fy, 0, size, text, box);
}

int plot_label(struct plot *p, double fx, double fy, double size, uint32_t rgb, const char *text,
               double mark_x, double mark_y, const double leader[4])
{
    if (leader) {
        static const struct plot_style st = {PLOT_GREY, 0.9, DASH_SOLID, 0};
        set_style(p, &st);
        cairo_move_to(p->cr, leader[0], leader[1]);
        cairo_line_to(p->cr, leader[2], leader[3]);
        cairo_stroke(p->cr);
    }
    text_halo(p, fx, fy, 0, size, rgb, text);
    if (p->nlabels == p->cap_labels) {
        size_t cap = p->cap_labels ? 2 * p->cap_labels : 16;
        struct plot_label *l = realloc(p->labels, cap * sizeof *l);
        if (!l)
            return -1;
        p->labels = l;
        p->cap_labels = cap;
    }
    struct plot_label *l = &p->labels[p->nlabels];
    l->text = strdup(text);
    if (!l->text)
        return -1;
    text_box(p, fx, fy, 0, size, text, l->box);
    l->mark_x = mark_x;
    l->mark_y = mark_y;
    l->has_leader = leader != NULL;
    for (int k = 0; k < 4; k++)
        l->leader[k] = leader ? leader[k] : 0.0;
    p->nlabels++;
    return 0;
}

void plot_segment(struct plot *p, double fx0, double fy0, double fx1, double fy1,
                  const struct plot_style *st)
{
    set_style(p, st);
    cairo_move_to(p->cr, fx0, fy0);
    cairo_line_to(p->cr, fx1, fy1);
    cairo_stroke(p->cr);
}

/* ---- axes ---------------------------------------------------------------- */

static void plot_tick_text(const struct plot_axis *ax, double x, char *buf, size_t cap)
{
    if (ax->dates) {
        time_t t = (time_t)llround(ax->date_base_s + x * 86400.0);
        struct tm tm;
        gmtime_r(&t, &tm);
        strftime(buf, cap, ax->ticks.step < 1.0 ? "%m-%d %H:%M" : "%Y-%m-%d", &tm);
        return;
    }
    if (fabs(x) < ax->ticks.step * 1e-9)
        x = 0.0; /* no "-0" */
    snprintf(buf, cap, "%.*f", ax->ticks.decimals, x);
}

static double plot_axis_label_width(struct plot *p, const struct plot_axis *ax)
{
    double widest = 0.0;
    char buf[48];
    for (int k = 0; k < ax->ticks.count; k++) {
        plot_tick_text(ax, ax->ticks.first + k * ax->ticks.step, buf, sizeof buf);
        widest = fmax(widest, plot_text_width(p, buf, p->font * 0.85, 0));
    }
    return widest;
}

static void axis_set(struct plot_axis *ax, double lo, double hi, int max_ticks)
{
    if (ticks_nice(lo, hi, max_ticks, &ax->ticks) != 0)
        ticks_nice(0.0, 1.0, max_ticks, &ax->ticks);
    /* date steps under a day read as hours only from a clock-sized step */
    ax->lo = ax->ticks.first;
    ax->hi = ax->ticks.first + (ax->ticks.count - 1) * ax->ticks.step;
}

void plot_axis_fit(struct plot *p, struct plot_axis *ax, double lo, double hi, double len_px,
                   int vertical)
{
    if (!isfinite(lo) || !isfinite(hi)) {
        lo = 0.0;
        hi = 1.0;
    }
    double fs = p->font * 0.85;
    if (vertical) {
        int fit = ticks_fit(len_px, fs, fs * 1.8);
        axis_set(ax, lo, hi, fit < 9 ? fit : 9);
        return;
    }
    /* labels' width depends on the ticks chosen: settle in a few rounds */
    int max_ticks = 11;
    for (int round = 0; round < 6; round++) {
        axis_set(ax, lo, hi, max_ticks);
        int fit = ticks_fit(len_px, plot_axis_label_width(p, ax), fs * 1.5);
        if (ax->ticks.count <= fit)
            return;
        max_ticks = fit < ax->ticks.count - 1 ? fit : ax->ticks.count - 1;
    }
}

void plot_axis_fit_tight(struct plot *p, struct plot_axis *ax, double lo, double hi, double len_px,
                         int vertical)
{
    plot_axis_fit(p, ax, lo, hi, len_px, vertical);
    if (!isfinite(lo) || !isfinite(hi) || !(hi > lo))
        return;
    double step = ax->ticks.step;
    double first = ceil(lo / step - 1e-9) * step;
    int count = (int)floor((hi - first) / step + 1e-9) + 1;
    if (count < 2)
        return; /* too few ticks inside: keep the round ends */
    ax->ticks.first = first;
    ax->ticks.count = count;
    ax->lo = lo;
    ax->hi = hi;
}

/* The smallest 1, 2, 2.5 or 5 times a power of ten at or above x > 0. */
static double nice_ceil(double x)
{
    static const double mult[] = {1.0, 2.0, 2.5, 5.0, 10.0};
    double p = pow(10.0, floor(log10(x)));
    for (int k = 0; k < 5; k++)
        if (mult[k] * p >= x * (1 - 1e-12))
            return mult[k] * p;
    return 10.0 * p;
}

void plot_axis_align(struct plot *p, struct plot_axis *ax2, double lo, double hi,
                     const struct plot_axis *ref, double len_px)
{
    const struct ticks *t = &ref->ticks;
    double z = -t->first / t->step; /* index of the zero tick */
    int below = (int)llround(z), above = t->count - 1 - below;
    if (fabs(z - below) > 1e-6 || below < 0 || above < 0 || !isfinite(lo) || !isfinite(hi) ||
        (lo < 0 && below == 0) || (hi > 0 && above == 0)) {
        plot_axis_fit(p, ax2, lo, hi, len_px, 1);
        return;
    }
    double need = 0.0;
    if (hi > 0)
        need = fmax(need, hi / above);
    if (lo < 0)
        need = fmax(need, -lo / below);
    double step = need > 0 ? nice_ceil(need) : 1.0;
    ax2->ticks.step = step;
    ax2->ticks.first = -below * step;
    ax2->ticks.count = t->count;
    int d = (int)-floor(log10(step) + 1e-9);
    if (fabs(step / pow(10.0, floor(log10(step))) - 2.5) < 1e-9)
        d++; /* 2.5 x 10^n needs one more digit */
    ax2->ticks.decimals = d > 0 ? d : 0;
    ax2->lo = ax2->ticks.first;
    ax2->hi = ax2->ticks.first + (t->count - 1) * step;
}

double plot_px(const struct plot_panel *pa, double x)
{
    return pa->x0 + (x - pa->x.lo) / (pa->x.hi - pa->x.lo) * (pa->x1 - pa->x0);
}

static double map_y(const struct plot_panel *pa, const struct plot_axis *ax, double y)
{
    return pa->y1 - (y - ax->lo) / (ax->hi - ax->lo) * (pa->y1 - pa->y0);
}

double plot_py(const struct plot_panel *pa, double y)
{
    return map_y(pa, &pa->y, y);
}
static double plot_py2(const struct plot_panel *pa, double y)
{
    return map_y(pa, &pa->y2, y);
}

static void clip_panel(struct plot *p, const struct plot_panel *pa)
{
    cairo_save(p->cr);
    cairo_new_path(p->cr);
    cairo_rectangle(p->cr, pa->x0, pa->y0, pa->x1 - pa->x0, pa->y1 - pa->y0);
    cairo_clip(p->cr);
}

static void unclip(struct plot *p)
{
    cairo_new_path(p->cr);
    cairo_restore(p->cr);
}

static void rotated_title(struct plot *p, double fx, double fy, const char *text)
{
    double w = plot_text_width(p, text, p->font, 0);
    cairo_save(p->cr);
    cairo_translate(p->cr, fx, fy);
    cairo_rotate(p->cr, -M_PI / 2);
    cairo_move_to(p->cr, -w / 2, 0);
    set_rgb(p, 0x222222u, 1);
    cairo_show_text(p->cr, text);
    cairo_restore(p->cr);
}

void plot_panel_draw(struct plot *p, const struct plot_panel *pa)
{
    cairo_t *cr = p->cr;
    double fs = p->font * 0.85, tick = p->font * 0.35;
    char buf[48];
    cairo_save(cr);
    cairo_set_dash(cr, NULL, 0, 0);
    cairo_set_line_cap(cr, CAIRO_LINE_CAP_BUTT);
    /* grid: light enough to read past, there to read values off */
    cairo_set_line_width(cr, p->lw * 0.6);
    set_rgb(p, 0xDDDDDDu, 1);
    for (int k = 0; k < pa->x.ticks.count; k++) {
        double fx = plot_px(pa, pa->x.ticks.first + k * pa->x.ticks.step);
        cairo_move_to(cr, fx, pa->y0);
        cairo_line_to(cr, fx, pa->y1);
    }
    for (int k = 0; k < pa->y.ticks.count; k++) {
        double fy = plot_py(pa, pa->y.ticks.first + k * pa->y.ticks.step);
        cairo_move_to(cr, pa->x0, fy);
        cairo_line_to(cr, pa->x1, fy);
    }
    cairo_stroke(cr);
    /* frame and ticks */
    cairo_set_line_width(cr, p->lw * 0.8);
    set_rgb(p, 0x444444u, 1);
    cairo_rectangle(cr, pa->x0, pa->y0, pa->x1 - pa->x0, pa->y1 - pa->y0);
    for (int k = 0; k < pa->x.ticks.count; k++) {
        double fx = plot_px(pa, pa->x.ticks.first + k * pa->x.ticks.step);
        cairo_move_to(cr, fx, pa->y1);
        cairo_line_to(cr, fx, pa->y1 + tick);
    }
    for (int k = 0; k < pa->y.ticks.count; k++) {
        double fy = plot_py(pa, pa->y.ticks.first + k * pa->y.ticks.step);
        cairo_move_to(cr, pa->x0 - tick, fy);
        cairo_line_to(cr, pa->x0, fy);
    }
    if (pa->has_y2)
        for (int k = 0; k < pa->y2.ticks.count; k++) {
            double fy = plot_py2(pa, pa->y2.ticks.first + k * pa->y2.ticks.step);
            cairo_move_to(cr, pa->x1, fy);
            cairo_line_to(cr, pa->x1 + tick, fy);
        }
    cairo_stroke(cr);
    cairo_restore(cr);

    for (int k = 0; k < pa->y.ticks.count; k++) {
        double v = pa->y.ticks.first + k * pa->y.ticks.step;
        plot_tick_text(&pa->y, v, buf, sizeof buf);
        set_font(p, fs, 0);
        plot_text(p, pa->x0 - tick * 1.8, plot_py(pa, v) + fs * 0.35, 2, fs, 0, 0x222222u, buf);
    }
    double wy = plot_axis_label_width(p, &pa->y);
    rotated_title(p, pa->x0 - tick * 1.8 - wy - p->font * 0.6, (pa->y0 + pa->y1) / 2, pa->y.label);
    if (pa->has_y2) {
        for (int k = 0; k < pa->y2.ticks.count; k++) {
            double v = pa->y2.ticks.first + k * pa->y2.ticks.step;
            plot_tick_text(&pa->y2, v, buf, sizeof buf);
            plot_text(p, pa->x1 + tick * 1.8, plot_py2(pa, v) + fs * 0.35, 0, fs, 0, 0x222222u,
                      buf);
        }
        double w2 = plot_axis_label_width(p, &pa->y2);
        rotated_title(p, pa->x1 + tick * 1.8 + w2 + p->font * 1.4, (pa->y0 + pa->y1) / 2,
                      pa->y2.label);
    }
    if (pa->x_labels) {
        for (int k = 0; k < pa->x.ticks.count; k++) {
            double v = pa->x.ticks.first + k * pa->x.ticks.step;
            plot_tick_text(&pa->x, v, buf, sizeof buf);
            /* centred on its tick, but kept inside the figure at either end */
            double w = plot_text_width(p, buf, fs, 0), cx = plot_px(pa, v);
            cx = fmin(fmax(cx, w / 2 + 2), p->w - w / 2 - 2);
            plot_text(p, cx, pa->y1 + tick + fs * 1.15, 1, fs, 0, 0x222222u, buf);
        }
        plot_text(p, (pa->x0 + pa->x1) / 2, pa->y1 + tick + fs * 1.15 + p->font * 1.45, 1, p->font,
                  0, 0x222222u, pa->x.label);
    }
}

/* ---- data ---------------------------------------------------------------- */

struct pen {
    cairo_t *cr;
    int down;
};

static void pen_to(struct pen *pen, double fx, double fy)
{
    if (pen->down)
        cairo_line_to(pen->cr, fx, fy);
    else
        cairo_move_to(pen->cr, fx, fy);
    pen->down = 1;
}

/* One pixel column's points, reduced to first, lowest, highest, last. */
struct column {
    int used;
    long col;
    double fx_first, fy_first, fx_last, fy_last;
    double fy_lo, fy_hi, fx_lo, fx_hi;
    size_t k_lo, k_hi;
};

static void column_flush(struct column *c, struct pen *pen)
{
    if (!c->used)
        return;
    pen_to(pen, c->fx_first, c->fy_first);
    if (c->k_lo < c->k_hi) {
        pen_to(pen, c->fx_lo, c->fy_lo);
        pen_to(pen, c->fx_hi, c->fy_hi);
    } else {
        pen_to(pen, c->fx_hi, c->fy_hi);
        pen_to(pen, c->fx_lo, c->fy_lo);
    }
    pen_to(pen, c->fx_last, c->fy_last);
    c->used = 0;
}

/* A line being drawn: the pen, the pixel column being reduced, where the
 * last sample was and how many were fed. */
struct plot_run {
    struct plot *p;
    const struct plot_panel *pa;
    const struct plot_axis *ay;
    struct pen pen;
    struct column c;
    int reduce;
    double x_div, break_dx, xprev;
    size_t k;
};

static void run_init(struct plot_run *r, struct plot *p, const struct plot_panel *pa, int right,
                     size_t n, double x_div, double break_dx, const struct plot_style *st)
{
    memset(r, 0, sizeof *r);
    r->p = p;
    r->pa = pa;
    r->ay = right ? &pa->y2 : &pa->y;
    r->pen = (struct pen){p->cr, 0};
    /* reduce only when there are several points per pixel column */
    r->reduce = (double)n > 4.0 * (pa->x1 - pa->x0);
    r->x_div = x_div;
    r->break_dx = break_dx;
    r->xprev = NAN;
    clip_panel(p, pa);
    set_style(p, st);
    cairo_new_path(p->cr);
}

static void run_finish(struct plot_run *r)
{
    column_flush(&r->c, &r->pen);
    cairo_stroke(r->p->cr);
    unclip(r->p);
}

struct plot_run *plot_line_start(struct plot *p, const struct plot_panel *pa, int right, size_t n,
                                 double x_div, double break_dx, const struct plot_style *st)
{
    struct plot_run *r = malloc(sizeof *r);
    if (r)
        run_init(r, p, pa, right, n, x_div, break_dx, st);
    return r;
}

void plot_line_feed(struct plot_run *r, const double *x, const double *y, size_t n)
{
    struct column *c = &r->c;
    for (size_t j = 0; j < n; j++) {
        size_t k = r->k++;
        int ok = isfinite(x[j]) && isfinite(y[j]);
        if (!ok || (r->break_dx > 0 && isfinite(r->xprev) && x[j] - r->xprev > r->break_dx)) {
            column_flush(c, &r->pen);
            r->pen.down = 0;
        }
        if (isfinite(x[j]))
            r->xprev = x[j];
        if (!ok)
            continue;
        double fx = plot_px(r->pa, x[j] / r->x_div), fy = map_y(r->pa, r->ay, y[j]);
        if (!r->reduce) {
            pen_to(&r->pen, fx, fy);
            continue;
        }
        long col = (long)floor(fx);
        if (c->used && col != c->col)
            column_flush(c, &r->pen);
        if (!c->used) {
            *c = (struct column){1, col, fx, fy, fx, fy, fy, fy, fx, fx, k, k};
            continue;
        }
        c->fx_last = fx;
        c->fy_last = fy;
        if (fy < c->fy_lo) {
            c->fy_lo = fy, c->fx_lo = fx, c->k_lo = k;
        }
        if (fy > c->fy_hi) {
            c->fy_hi = fy, c->fx_hi = fx, c->k_hi = k;
        }
    }
}

void plot_line_end(struct plot_run *r)
{
    if (!r)
        return;
    run_finish(r);
    free(r);
}

void plot_line(struct plot *p, const struct plot_panel *pa, int right, const double *x,
               const double *y, size_t n, double x_div, double break_dx,
               const struct plot_style *st)
{
    struct plot_run r;
    run_init(&r, p, pa, right, n, x_div, break_dx, st);
    plot_line_feed(&r, x, y, n);
    run_finish(&r);
}

void plot_band(struct plot *p, const struct plot_panel *pa, const double *x, const double *lo,
               const double *hi, size_t n, const struct plot_style *st)
{
    clip_panel(p, pa);
    set_rgb(p, st->rgb, st->alpha);
    size_t k = 0;
    while (k < n) {
        while (k < n && !(isfinite(x[k]) && isfinite(lo[k]) && isfinite(hi[k])))
            k++;
        size_t start = k;
        while (k < n && isfinite(x[k]) && isfinite(lo[k]) && isfinite(hi[k]))
            k++;
        if (k - start < 2)
            continue;
        cairo_new_path(p->cr);
        for (size_t j = start; j < k; j++)
            cairo_line_to(p->cr, plot_px(pa, x[j]), plot_py(pa, hi[j]));
        for (size_t j = k; j-- > start;)
            cairo_line_to(p->cr, plot_px(pa, x[j]), plot_py(pa, lo[j]));
        cairo_close_path(p->cr);
        cairo_fill(p->cr);
    }
    unclip(p);
}

void plot_vspan(struct plot *p, const struct plot_panel *pa, double xa, double xb, int hatched,
                const struct plot_style *st)
{
    double fa = fmax(plot_px(pa, xa), pa->x0), fb = fmin(plot_px(pa, xb), pa->x1);
    if (!(fb > fa))
        return;
    if (fb - fa < p->lw)
        fb = fa + p->lw; /* a short interval stays visible */
    clip_panel(p, pa);
    cairo_rectangle(p->cr, fa, pa->y0, fb - fa, pa->y1 - pa->y0);
    if (!hatched) {
        set_rgb(p, st->rgb, st->alpha);
        cairo_fill(p->cr);
    } else {
        cairo_clip(p->cr);
        struct plot_style s = *st;
        s.width = 0.7;
        set_style(p, &s);
        double gap = p->font * 0.5, hgt = pa->y1 - pa->y0;
        for (double x = fa - hgt; x < fb; x += gap) {
            cairo_move_to(p->cr, x, pa->y1);
            cairo_line_to(p->cr, x + hgt, pa->y0);
        }
        cairo_stroke(p->cr);
    }
    unclip(p);
}

void plot_hline(struct plot *p, const struct plot_panel *pa, double y, const struct plot_style *st,
                const char *label, int label_left)
{
    double fy = plot_py(pa, y);
    p->has_ref_box = 0;
    if (!(fy >= pa->y0 && fy <= pa->y1))
        return;
    clip_panel(p, pa);
    set_style(p, st);
    cairo_move_to(p->cr, pa->x0, fy);
    cairo_line_to(p->cr, pa->x1, fy);
    cairo_stroke(p->cr);
    unclip(p);
    if (label && *label) {
        double fs = p->font * 0.8;
        /* above the line unless that leaves the plot area */
        double by = fy - fs * 0.45 - fs > pa->y0 ? fy - fs * 0.45 : fy + fs * 1.15;
        double tx = label_left ? pa->x0 + p->font * 0.4 : pa->x1 - p->font * 0.4;
        text_halo(p, tx, by, label_left ? 0 : 2, fs, st->rgb, label);
        note_ref_box(p, tx, by, label_left ? 0 : 2, fs, label);
    }
}

void plot_vline(struct plot *p, const struct plot_panel *pa, double x, const struct plot_style *st,
                const char *label)
{
    double fx = plot_px(pa, x);
    p->has_ref_box = 0;
    if (!(fx >= pa->x0 && fx <= pa->x1))
        return;
    clip_panel(p, pa);
    set_style(p, st);
    cairo_move_to(p->cr, fx, pa->y0);
    cairo_line_to(p->cr, fx, pa->y1);
    cairo_stroke(p->cr);
    unclip(p);
    if (label && *label) {
        double fs = p->font * 0.8;
        double w = plot_text_width(p, label, fs, 0);
        /* to the left of the line when it would run off the right edge */
        int anchor = fx + fs * 0.4 + w > pa->x1 ? 2 : 0;
        double tx = anchor ? fx - fs * 0.4 : fx + fs * 0.4;
        text_halo(p, tx, pa->y0 + fs * 1.3, anchor, fs, st->rgb, label);
        note_ref_box(p, tx, pa->y0 + fs * 1.3, anchor, fs, label);
    }
}

static void plot_marker_at(struct plot *p, double fx, double fy, enum plot_mark m, int filled,
                           const struct plot_style *st)
{
    cairo_t *cr = p->cr;
    double r = p->font * 0.32 * (st->width > 0 ? st->width : 1.0);
    cairo_save(cr);
    cairo_new_path(cr);
    switch (m) {
    case MARK_CIRCLE:
        cairo_arc(cr, fx, fy, r, 0, 2 * M_PI);
        break;
    case MARK_TRIANGLE:
        cairo_move_to(cr, fx, fy - 1.2 * r);
        cairo_line_to(cr, fx + 1.1 * r, fy + 0.75 * r);
        cairo_line_to(cr, fx - 1.1 * r, fy + 0.75 * r);
        cairo_close_path(cr);
        break;
    case MARK_SQUARE:
        cairo_rectangle(cr, fx - 0.9 * r, fy - 0.9 * r, 1.8 * r, 1.8 * r);
        break;
    case MARK_DIAMOND:
        cairo_move_to(cr, fx, fy - 1.25 * r);
        cairo_line_to(cr, fx + 1.0 * r, fy);
        cairo_line_to(cr, fx, fy + 1.25 * r);
        cairo_line_to(cr, fx - 1.0 * r, fy);
        cairo_close_path(cr);
        break;
    case MARK_CROSS:
        cairo_move_to(cr, fx - r, fy - r);
        cairo_line_to(cr, fx + r, fy + r);
        cairo_move_to(cr, fx - r, fy + r);
        cairo_line_to(cr, fx + r, fy - r);
        filled = 0;
        break;
    }
    set_rgb(p, st->rgb, st->alpha);
    cairo_set_dash(cr, NULL, 0, 0);
    cairo_set_line_width(cr, p->lw * (m == MARK_CROSS ? 1.6 : 1.1));
    if (filled) {
        cairo_fill_preserve(cr);
        set_rgb(p, 0x222222u, 1); /* a dark edge keeps light fills visible in greyscale */
        cairo_set_line_width(cr, p->lw * 0.6);
    }
    cairo_stroke(cr);
    cairo_restore(cr);
}

void plot_marker(struct plot *p, const struct plot_panel *pa, double x, double y, enum plot_mark m,
                 int filled, const struct plot_style *st)
{
    if (!isfinite(x) || !isfinite(y))
        return;
    double fx = plot_px(pa, x), fy = plot_py(pa, y);
    if (fx < pa->x0 - 0.5 || fx > pa->x1 + 0.5 || fy < pa->y0 - 0.5 || fy > pa->y1 + 0.5)
        return;
    /* not clipped: a mark on the frame stays whole */
    plot_marker_at(p, fx, fy, m, filled, st);
}

/* ---- legend -------------------------------------------------------------- */

static double key_width(struct plot *p, const struct plot_key *k)
{
    return p->font * 2.4 + plot_text_width(p, k->text, p->font * 0.85, 0) + p->font * 1.2;
}

static void key_draw(struct plot *p, const struct plot_key *k, double fx, double fy)
{
    double sw = p->font * 2.0, mid = fy - p->font * 0.3;
    if (k->box) {
        struct plot_panel box = {.x0 = fx, .x1 = fx + sw, .y0 = fy - p->font * 0.75, .y1 = fy};
        box.x.lo = 0, box.x.hi = 1;
        plot_vspan(p, &box, 0, 1, k->box == 2, &k->st);
        cairo_save(p->cr);
        cairo_set_dash(p->cr, NULL, 0, 0);
        cairo_set_line_width(p->cr, p->lw * 0.5);
        set_rgb(p, 0x888888u, 1);
        cairo_rectangle(p->cr, box.x0, box.y0, sw, box.y1 - box.y0);
        cairo_stroke(p->cr);
        cairo_restore(p->cr);
    } else if (k->mark >= 0) {
        plot_marker_at(p, fx + sw / 2, mid, (enum plot_mark)k->mark, k->filled, &k->st);
    } else {
        set_style(p, &k->st);
        cairo_new_path(p->cr);
        cairo_move_to(p->cr, fx, mid);
        cairo_line_to(p->cr, fx + sw, mid);
        cairo_stroke(p->cr);
    }
    plot_text(p, fx + sw + p->font * 0.4, fy, 0, p->font * 0.85, 0, 0x222222u, k->text);
}

void plot_legend(struct plot *p, struct plot_panel *pa, const struct plot_key *k, size_t n)
{
    double avail = pa->x1 - pa->x0, fy = pa->legend_y;
    size_t start = 0;
    pa->lg_x0 = pa->lg_x1 = pa->lg_y0 = pa->lg_y1 = 0;
    if (n)
        pa->lg_x0 = pa->x1, pa->lg_x1 = pa->x1, pa->lg_y1 = fy + p->font * 0.4;
    while (start < n) {
        /* as many keys as fit on this row, kept in their order */
        double w = 0;
        size_t end = start;
        while (end < n && (end == start || w + key_width(p, &k[end]) <= avail))
            w += key_width(p, &k[end++]);
        double fx = pa->x1 - w + p->font * 1.2;
        pa->lg_x0 = fmin(pa->lg_x0, fx - p->font * 0.2);
        pa->lg_y0 = fy - p->font * 1.1;
        for (size_t j = start; j < end; j++) {
            key_draw(p, &k[j], fx, fy);
            fx += key_width(p, &k[j]);
        }
        start = end;
        fy -= p->font * 1.35;
    }
}

int plot_legend_rows(struct plot *p, double width_px, const struct plot_key *k, size_t n)
{
    int rows = 0;
    size_t start = 0;
    while (start < n) {
        double w = 0;
        size_t end = start;
        while (end < n && (end == start || w + key_width(p, &k[end]) <= width_px))
            w += key_width(p, &k[end++]);
        start = end;
        rows++;
    }
    return rows;
}

double plot_fit_size(struct plot *p, const char *text, double size, int bold, double width_px)
{
    double w = plot_text_width(p, text, size, bold);
    return w > width_px && w > 0 ? size * width_px / w : size;
}

void plot_stack(struct plot *p, double top, double bottom, double left, double right,
                const double *weight, const int *legend_rows, size_t n, struct plot_panel *pa)
{
    double row = p->font * 1.35, gap = p->font * 0.7, total_w = 0, avail = bottom - top;
    for (size_t k = 0; k < n; k++) {
        total_w += weight[k];
        avail -= legend_rows[k] * row + gap;
    }
    double y = top;
    for (size_t k = 0; k < n; k++) {
        y += legend_rows[k] * row + gap;
        pa[k].legend_y = y - gap * 0.9;
        pa[k].x0 = left;
        pa[k].x1 = right;
        pa[k].y0 = y;
        y += fmax(avail, p->font * 3 * (double)n) * weight[k] / total_w;
        pa[k].y1 = y;
        pa[k].x_labels = k + 1 == n;
    }
}

void plot_margins(struct plot *p, const struct plot_panel *pa, size_t n, double *left,
                  double *right)
{
    double tick = p->font * 0.35, wl = 0, wr = 0;
    int any_y2 = 0;
    for (size_t k = 0; k < n; k++) {
        wl = fmax(wl, plot_axis_label_width(p, &pa[k].y));
        if (pa[k].has_y2) {
            any_y2 = 1;
            wr = fmax(wr, plot_axis_label_width(p, &pa[k].y2));
        }
    }
    *left = tick * 1.8 + wl + p->font * 2.2;
    *right = any_y2 ? tick * 1.8 + wr + p->font * 2.6 : p->font * 1.5;
}

int plot_text_wrap(struct plot *p, double fx, double fy, double width_px, double size,
                   int max_lines, uint32_t rgb, const char *text)
{
    size_t len = strlen(text), start = 0;
    char *buf = malloc(len + 1);
    if (!buf)
        return 0;
    int lines = 0;
    while (start < len && lines < max_lines) {
        while (text[start] == ' ')
            start++;
        size_t end = len;
        if (lines + 1 < max_lines) {
            /* the longest run of whole words that fits */
            size_t best = 0;
            for (size_t k = start; k <= len; k++) {
                if (k < len && text[k] != ' ')
                    continue;
                memcpy(buf, text + start, k - start);
                buf[k - start] = '\0';
                if (best && plot_text_width(p, buf, size, 0) > width_px)
                    break;
                best = k;
            }
            end = best ? best : len;
        }
        memcpy(buf, text + start, end - start);
        buf[end - start] = '\0';
        plot_text(p, fx, fy + lines * size * 1.3, 0, plot_fit_size(p, buf, size, 0, width_px), 0,
                  rgb, buf);
        lines++;
        start = end;
    }
    free(buf);
    return lines;
}

/* ---- axes map ------------------------------------------------------------ */

static json_t *axis_json(const struct plot_axis *ax)
{
    return json_pack("{s:f, s:f, s:f, s:f, s:i, s:s, s:b}", "min", ax->lo, "max", ax->hi,
                     "tick_first", ax->ticks.first, "tick_step", ax->ticks.step, "ticks",
                     ax->ticks.count, "label", ax->label, "dates", ax->dates);
}

/* The axes map (see plot_finish_map) as JSON on out: 0, or -1. */
static int plot_axes_json(FILE *out, const struct plot *p, const struct plot_panel *pa, size_t n)
{
    static const char *const names[] = {"png", "svg", "pdf"};
    json_t *root = json_pack("{s:f, s:f, s:s, s:[]}", "width", p->w, "height", p->h, "format",
                             names[p->fmt], "panels");
    if (!root)
        return -1;
    json_t *arr = json_object_get(root, "panels");
    for (size_t k = 0; k < n; k++) {
        json_t *o = json_pack("{s:s, s:f, s:f, s:f, s:f, s:o, s:o}", "name", pa[k].name, "left",
                              pa[k].x0, "top", pa[k].y0, "right", pa[k].x1, "bottom", pa[k].y1, "x",
                              axis_json(&pa[k].x), "y", axis_json(&pa[k].y));
        if (o && pa[k].has_y2)
            json_object_set_new(o, "y2", axis_json(&pa[k].y2));
        if (o && pa[k].lg_x1 > pa[k].lg_x0)
            json_object_set_new(o, "legend",
                                json_pack("{s:f, s:f, s:f, s:f}", "left", pa[k].lg_x0, "top",
                                          pa[k].lg_y0, "right", pa[k].lg_x1, "bottom",
                                          pa[k].lg_y1));
        if (!o || json_array_append_new(arr, o) != 0) {
            json_decref(root);
            return -1;
        }
    }
    if (p->nlabels) {
        json_t *labels = json_array();
        if (!labels || json_object_set_new(root, "labels", labels) != 0) {
            json_decref(root);
            return -1;
        }
        for (size_t k = 0; k < p->nlabels; k++) {
            const struct plot_label *l = &p->labels[k];
            json_t *o = json_pack("{s:s, s:f, s:f, s:f, s:f, s:f, s:f}", "text", l->text, "left",
                                  l->box[0], "top", l->box[1], "right", l->box[2], "bottom",
                                  l->box[3], "mark_x", l->mark_x, "mark_y", l->mark_y);
            if (o && l->has_leader)
                json_object_set_new(o, "leader",
                                    json_pack("[f, f, f, f]", l->leader[0], l->leader[1],
                                              l->leader[2], l->leader[3]));
            if (!o || json_array_append_new(labels, o) != 0) {
                json_decref(root);
                return -1;
            }
        }
    }
    int rc = json_dumpf(root, out, JSON_INDENT(2) | JSON_REAL_PRECISION(12));
    json_decref(root);
    return rc == 0 ? 0 : -1;
}

void plot_ohm_text(const char *t, char *buf, size_t cap)
{
    size_t used = 0;
    while (*t && used + 4 < cap) {
        if (strncmp(t, "mOhm", 4) == 0) {
            memcpy(buf + used, "m\u03a9", 3);
            used += 3;
            t += 4;
        } else {
            buf[used++] = *t++;
        }
    }
    if (cap)
        buf[used < cap ? used : cap - 1] = '\0';
}
