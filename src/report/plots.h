/* plots: packbook's three figures, drawn with the plot layer.
 *
 * Owns nothing. Each function renders one figure to path (PNG, SVG or PDF
 * by its extension) and, when opts->axes_json is set, writes the axes map
 * there. Returns PB_OK or fills err (PB_EUSAGE for a bad name or size,
 * PB_EOUTPUT when the file cannot be written, PB_ENOMEM). */
#ifndef PB_PLOTS_H
#define PB_PLOTS_H

#include "../core/analyze.h"
#include "../core/health.h"
#include "report_health.h"

struct plot_opts {
    int width, height;     /* 0: the figure's default */
    const char *title;     /* NULL: the log's or pack's name */
    const char *axes_json; /* NULL: no axes map */
    double reserve_pct;    /* flight: the landing reserve drawn on the SoC panel; 0: none */
};

/* Flight: voltage with the sag-corrected OCV, current and power, SoC by
 * counting and from the OCV with the landing reserve, per-cell voltages;
 * cut-off crossings and gaps
 * shaded; a title block with the headline figures. name: the log's name. */
enum pb_code plot_flight(const char *path, const struct plot_opts *o, const struct series *s,
                         const struct analysis *a, double rated_mah, const char *name,
                         struct pb_error *err);

/* Trend: R0 per cell and capacity % of rated per flight and per bucket,
 * against equivalent cycles (or dates when by_date), with each fitted
 * line, its 95 % band, the retirement levels and the projected crossing;
 * with cell data a third panel of each flight's resting cell imbalance
 * with its weakest cell, and the pack's weakest cell in the title. */
enum pb_code plot_trend(const char *path, const struct plot_opts *o, const struct pack_view *v,
                        const struct health_rules *rules, int by_date, struct pb_error *err);

/* Fleet: each pack at (R0 change from its baseline, capacity %), by
 * status, with the rule levels; packs needing attention labelled. */
enum pb_code plot_fleet(const char *path, const struct plot_opts *o, const struct pack_view *v,
                        size_t n, const struct health_rules *rules, struct pb_error *err);

#endif
