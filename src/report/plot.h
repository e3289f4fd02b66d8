/* plot: a small drawing layer over cairo for packbook's figures.
 *
 * Owns struct plot (plot_new/plot_free): one output file being drawn, in
 * PNG, SVG or PDF by its extension. Nothing reaches the named file until
 * plot_finish succeeds: drawing goes to a temporary file beside it that is
 * renamed at the end (and removed by plot_free otherwise).
 *
 * Coordinates are in pixels (PNG) or points (SVG, PDF), origin top left;
 * a figure of W x H has the same layout in every format. A panel maps data
 * to a rectangle; its axes span round ticks (core/ticks) so the first and
 * last tick are the edges. Lines skip non-finite values and break across
 * gaps; long series are reduced to each pixel column's first, lowest,
 * highest and last value, which draws the same picture. */
#ifndef PB_PLOT_H
#define PB_PLOT_H

#include <stddef.h>
#include <stdint.h>

#include "../core/pb_error.h"
#include "../core/ticks.h"

/* Okabe & Ito (2008), "Color Universal Design": a set told apart with any
 * common colour-vision deficiency; series also differ by dash and width so
 * they survive greyscale printing. */
#define PLOT_BLACK 0x000000u
#define PLOT_ORANGE 0xE69F00u
#define PLOT_SKY 0x56B4E9u
#define PLOT_GREEN 0x009E73u
#define PLOT_YELLOW 0xF0E442u
#define PLOT_BLUE 0x0072B2u
#define PLOT_VERMILION 0xD55E00u
#define PLOT_PURPLE 0xCC79A7u
#define PLOT_GREY 0x8C8C8Cu

#define PLOT_MIN_W 480
#define PLOT_MIN_H 360
#define PLOT_MAX_SIDE 12000

enum plot_dash { DASH_SOLID = 0, DASH_LONG, DASH_DOT };
enum plot_mark { MARK_CIRCLE = 0, MARK_TRIANGLE, MARK_SQUARE, MARK_CROSS, MARK_DIAMOND };

struct plot_style {
    uint32_t rgb;
    double width; /* line width or marker size, in units of the figure's base line */
    enum plot_dash dash;
    double alpha; /* 0 means opaque */
};

struct plot_axis {
    double lo, hi;      /* data range shown: the first and last tick */
    struct ticks ticks; /* labels at ticks.first + k ticks.step */
    char label[96];     /* axis title with its unit, e.g. "voltage (V)" */
    int dates;          /* values are days since date_base_s; labels as ISO dates */
    double date_base_s;
};

struct plot_panel {
    char name[24];         /* for the axes map: "voltage", "current", ... */
    double x0, y0, x1, y1; /* plot area, x0 < x1, y0 < y1 (top edge y0) */
    struct plot_axis x, y; /* y is the left axis */
    struct plot_axis y2;   /* right axis, when has_y2 */
    int has_y2;
    int x_labels;                      /* draw the x tick labels and title under this panel */
    double legend_y;                   /* baseline of the legend row above the plot area */
    double lg_x0, lg_y0, lg_x1, lg_y1; /* the legend drawn (plot_legend), 0 when none */
};

struct plot;

/* Figure kind in the output's name: PNG, SVG or PDF; -1 when unknown. */
int plot_format_of(const char *path);

/* A figure of w x h drawn to path. Returns NULL with err filled. */
struct plot *plot_new(const char *path, int w, int h, struct pb_error *err);

/* Writes the figure and moves it to its name. Returns PB_OK or fills err. */
enum pb_code plot_finish(struct plot *p, struct pb_error *err);

/* plot_finish, with the axes map of the n panels (their rectangles, axis
 * ranges and ticks, legend boxes; JSON) written to map_path too
 * (NULL: none). The map is written first under a temporary name and moved
 * into place only once the figure is: a map that cannot be written leaves
 * no figure, and a figure that fails leaves no map (older ones stay). */
enum pb_code plot_finish_map(struct plot *p, const char *map_path, const struct plot_panel *pa,
                             size_t n, struct pb_error *err);

/* Frees p, removing the temporary file when not finished; NULL is a no-op. */
void plot_free(struct plot *p);

double plot_height(const struct plot *p);
double plot_font(const struct plot *p); /* base font size */
double plot_text_width(struct plot *p, const char *text, double size, int bold);

/* Parses "WxH" for --size; 0, or -1 with err filled. */
int plot_parse_size(const char *arg, int *w, int *h, struct pb_error *err);

/* Sets ax to the round ticks spanning [lo, hi] with at most what fits
 * along len_px (labels about label_px long). Non-finite or empty ranges
 * fall back to [0, 1]. */
void plot_axis_fit(struct plot *p, struct plot_axis *ax, double lo, double hi, double len_px,
                   int vertical);

/* As plot_axis_fit, but the axis spans exactly [lo, hi] with the round
 * ticks inside it (a time axis that ends where the log ends). */
void plot_axis_fit_tight(struct plot *p, struct plot_axis *ax, double lo, double hi, double len_px,
                         int vertical);

/* Sets ax2 (a right axis) to cover [lo, hi] with as many ticks as ref and
 * its zero on ref's zero, so both axes share the grid lines; ref must
 * contain 0. Falls back to plot_axis_fit otherwise. */
void plot_axis_align(struct plot *p, struct plot_axis *ax2, double lo, double hi,
                     const struct plot_axis *ref, double len_px);

/* Data to figure coordinates. */
double plot_px(const struct plot_panel *pa, double x);
double plot_py(const struct plot_panel *pa, double y);
/* Frame, grid, ticks, tick labels and axis titles of a panel. */
void plot_panel_draw(struct plot *p, const struct plot_panel *pa);

/* A line through (x[k], y[k]), on the right axis when right. Values are
 * taken as x[k] / x_div; the line breaks where a value is not finite or
 * where x steps by more than break_dx (in x's own units; <= 0: never). */
void plot_line(struct plot *p, const struct plot_panel *pa, int right, const double *x,
               const double *y, size_t n, double x_div, double break_dx,
               const struct plot_style *st);

/* The same line fed in pieces, so its values need not all be held at once:
 * start (n: the samples that will be fed in all; NULL when out of memory),
 * feed x[k], y[k] in order, end (draws it and frees the run; NULL is a
 * no-op). The figure is the same as plot_line's. */
struct plot_run;
struct plot_run *plot_line_start(struct plot *p, const struct plot_panel *pa, int right, size_t n,
                                 double x_div, double break_dx, const struct plot_style *st);
void plot_line_feed(struct plot_run *r, const double *x, const double *y, size_t n);
void plot_line_end(struct plot_run *r);

/* Filled band between lo[k] and hi[k]. */
void plot_band(struct plot *p, const struct plot_panel *pa, const double *x, const double *lo,
               const double *hi, size_t n, const struct plot_style *st);

/* Shades x in [xa, xb] over the whole panel height; hatched draws
 * diagonal lines (missing data) instead of a tint. */
void plot_vspan(struct plot *p, const struct plot_panel *pa, double xa, double xb, int hatched,
                const struct plot_style *st);

/* Horizontal (or vertical) reference line across the panel, with an
 * optional label inside the plot area at its right end (left end when
 * label_left), or at its top for a vertical line. */
void plot_hline(struct plot *p, const struct plot_panel *pa, double y, const struct plot_style *st,
                const char *label, int label_left);
void plot_vline(struct plot *p, const struct plot_panel *pa, double x, const struct plot_style *st,
                const char *label);

/* A marker at data (x, y); filled or hollow. */
void plot_marker(struct plot *p, const struct plot_panel *pa, double x, double y, enum plot_mark m,
                 int filled, const struct plot_style *st);

/* Text at figure coordinates: anchor 0 left, 1 centre, 2 right; y is the
 * baseline. Returns the text's width. */
double plot_text(struct plot *p, double fx, double fy, int anchor, double size, int bold,
                 uint32_t rgb, const char *text);

/* A legend entry: a line sample (or a marker when mark >= 0, or a shaded
 * box when box) and its text. */
struct plot_key {
    const char *text;
    struct plot_style st;
    int mark;   /* enum plot_mark, or -1 for a line sample */
    int filled; /* for marks */
    int box;    /* 1 tint, 2 hatched */
};

/* Lays the keys out in a row ending at the panel's right edge, on the
 * panel's legend baseline, wrapping leftwards never: keys that do not fit
 * go on a second row above. */
void plot_legend(struct plot *p, struct plot_panel *pa, const struct plot_key *k, size_t n);

/* Rows plot_legend needs for the keys in a panel width_px wide. */
int plot_legend_rows(struct plot *p, double width_px, const struct plot_key *k, size_t n);

/* The largest size (at most size) at which text fits in width_px. */
double plot_fit_size(struct plot *p, const char *text, double size, int bold, double width_px);

/* Stacks n panels from top to bottom (the last one's plot area ends at
 * bottom): panel k gets legend_rows[k] legend rows above it and a share
 * of the height by weight[k]; x0/x1 are left and right. Only the last
 * panel draws x labels. */
void plot_stack(struct plot *p, double top, double bottom, double left, double right,
                const double *weight, const int *legend_rows, size_t n, struct plot_panel *pa);

/* The left and right margins the panels' y tick labels and titles need. */
void plot_margins(struct plot *p, const struct plot_panel *pa, size_t n, double *left,
                  double *right);

/* Text wrapped at spaces into lines of at most width_px, from baseline fy
 * down; at most max_lines, the last one shrunk to fit what remains.
 * Returns the lines used. */
int plot_text_wrap(struct plot *p, double fx, double fy, double width_px, double size,
                   int max_lines, uint32_t rgb, const char *text);

/* A label recorded for the axes map ("labels": text, its ink box with the
 * halo, the point it names and the leader line from it, if any). */
struct plot_label {
    char *text;
    double box[4]; /* left, top, right, bottom */
    double mark_x, mark_y;
    double leader[4]; /* x0, y0, x1, y1 when has_leader */
    int has_leader;
};

/* Text at baseline (fx, fy), left-anchored, on a white halo, naming the
 * point (mark_x, mark_y); leader (x0, y0, x1, y1) or NULL: a thin grey line
 * drawn first. Recorded for the axes map. Returns 0, or -1 out of memory. */
int plot_label(struct plot *p, double fx, double fy, double size, uint32_t rgb, const char *text,
               double mark_x, double mark_y, const double leader[4]);

/* The box plot_label would record for the text at (fx, fy): left, top,
 * right, bottom of its ink with the halo. */
void plot_label_box(struct plot *p, double fx, double fy, double size, const char *text,
                    double box[4]);

/* The box of the label the last plot_hline or plot_vline drew; 0, or -1
 * when none has drawn one. */
int plot_ref_label_box(const struct plot *p, double box[4]);

/* A straight line in figure coordinates. */
void plot_segment(struct plot *p, double fx0, double fy0, double fx1, double fy1,
                  const struct plot_style *st);

/* t with "mOhm" written "m\u03a9" into buf (cut to cap): figures draw the symbol
 * whatever the terminal (reasons come from the core in plain ASCII). */
void plot_ohm_text(const char *t, char *buf, size_t cap);

#endif
