#include "report_predict.h"

#include <math.h>
#include <stdio.h>

#include "jsonout.h"
#include "report.h"

#include "../core/utf8.h"

static void mmss(char *buf, size_t cap, double s)
{
    if (!isfinite(s)) {
        snprintf(buf, cap, "not reached in %.0f h", 6.0);
        return;
    }
    long t = lround(s);
    snprintf(buf, cap, "%ld min %02ld s", t / 60, t % 60);
}

int report_predict_json(FILE *out, const struct predict_inputs *in, const struct predict_load *l,
                        double load_sd, const struct predict_opts *o, const struct predict_run *r,
                        const struct predict_mc *mc, const char *const *warn, int nwarn)
{
    static const char *const kinds[] = {"power", "current", "profile"};
    json_t *w = json_array();
    for (int k = 0; k < nwarn; k++)
        jout_append(w, json_string(warn[k]));
    json_t *counts = json_object();
    for (int k = 0; k < 5; k++)
        jout_set(counts, predict_limit_name((enum predict_limit)k),
                 json_integer(mc->binding_count[k]));
    double value = l->kind == LOAD_POWER     ? l->power_w
                   : l->kind == LOAD_CURRENT ? l->current_a
                                             : NAN;
    json_t *doc = json_pack(
        "{s:s, s:{s:o, s:o, s:o, s:i}, s:s, s:o, s:{s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:o, s:o, "
        "s:o},"
        " s:{s:o, s:i, s:s, s:o, s:o, s:b, s:o, s:o, s:o, s:o, s:{s:s, s:o, s:o}, s:o, s:o, s:o, "
        "s:o,"
        " s:o, s:o}, s:o}",
        "caution", "an estimate: it does not replace the aircraft's own low-voltage protection",
        "safe_time_s", "conservative", jout_num(mc->t_p05_s), "median", jout_num(mc->t_median_s),
        "p95", jout_num(mc->t_p95_s), "runs", mc->runs, "binding_limit",
        predict_limit_name(r->binding), "binding_counts", counts, "nominal", "t_safe_s",
        jout_num(r->t_safe_s), "soc_at_stop_pct", jout_num(r->soc_at_stop_pct), "v_at_stop_v",
        jout_num(r->v_at_stop_v), "i_at_stop_a", jout_num(r->i_at_stop_a), "t_reserve_s",
        jout_num(r->t_reserve_s), "t_floor_s", jout_num(r->t_floor_s), "t_collapse_s",
        jout_num(r->t_collapse_s), "t_empty_s", jout_num(r->t_empty_s), "soc_after_pct",
        jout_num(r->soc_after_pct), "v_after_v", jout_num(r->v_after_v), "inputs", "source",
        jout_str(in->source), "cells", in->cells, "chemistry", in->chem->name, "capacity_mah",
        jout_num(in->capacity_mah), "capacity_sd_mah", jout_num(in->capacity_sd_mah),
        "capacity_assumed", in->capacity_assumed, "r0_mohm", jout_num(in->r0_mohm), "r0_sd_mohm",
        jout_num(in->r0_sd_mohm), "r1_mohm", jout_num(in->r1_mohm), "tau_s", jout_num(in->tau_s),
        "load", "kind", kinds[l->kind], "value", jout_num(value), "sd", jout_num(load_sd),
        "soc0_pct", jout_num(o->soc0_pct), "reserve_pct", jout_num(o->reserve_pct),
        "floor_v_per_cell", jout_num(isfinite(o->floor_v) ? o->floor_v : in->chem->floor_v),
        "temp_c", jout_num(o->temp_c), "ea_j_mol", jout_num(o->ea_j_mol), "peukert_k",
        jout_num(o->peukert_k > 0 ? o->peukert_k : NAN), "warnings", w);
    json_t *inputs = doc ? json_object_get(doc, "inputs") : NULL;
    if (inputs) {
        json_object_set_new(inputs, "v_offset_v_per_cell", jout_num(in->v_offset_v));
        json_object_set_new(inputs, "v_offset_sd_v_per_cell", jout_num(in->v_offset_sd_v));
    }
    return jout_write(out, doc);
}

int report_predict_text(FILE *out, const struct predict_inputs *in, const struct predict_load *l,
                        double load_sd, const struct predict_opts *o, const struct predict_run *r,
                        const struct predict_mc *mc, const char *const *warn, int nwarn)
{
    char a[40], b[40];
    char sb[4 * 1024 + 4];
    fprintf(out, "packbook prediction from %s\n", utf8_printable(sb, sizeof sb, in->source));
    fprintf(out, "  %-15s %dS %s, capacity %.0f +/- %.0f mAh%s, R0 %.2f +/- %.2f %s", "pack",
            in->cells, in->chem->label, in->capacity_mah, in->capacity_sd_mah,
            in->capacity_assumed ? " (rated, no estimate)" : "", in->r0_mohm, in->r0_sd_mohm,
            report_mohm());
    if (isfinite(in->r1_mohm) && isfinite(in->tau_s))
        fprintf(out, ", RC %.2f %s / %.1f s", in->r1_mohm, report_mohm(), in->tau_s);
    fprintf(out, "\n");
    if (isfinite(in->v_offset_v) && in->v_offset_v != 0.0)
        fprintf(
            out, "  %-15s %+.0f +/- %.0f mV/cell against the %s table, from its logged voltage\n",
            "voltage", 1000.0 * in->v_offset_v, 1000.0 * 1.96 * in->v_offset_sd_v, in->chem->label);
    if (l->kind == LOAD_POWER)
        fprintf(out, "  %-15s %.0f W constant power (sd %.0f W)\n", "load", l->power_w, load_sd);
    else if (l->kind == LOAD_CURRENT)
        fprintf(out, "  %-15s %.2f A constant current (sd %.2f A)\n", "load", l->current_a,
                load_sd);
    else
        fprintf(out, "  %-15s a logged power profile of %.0f s, repeated\n", "load",
                l->prof_period_s);
    fprintf(out, "  %-15s SoC %.0f %% at the start, landing reserve %.0f %%, cut-off %.2f V/cell\n",
            "limits", o->soc0_pct, o->reserve_pct,
            isfinite(o->floor_v) ? o->floor_v : in->chem->floor_v);
    mmss(a, sizeof a, mc->t_p05_s);
    mmss(b, sizeof b, mc->t_median_s);
    fprintf(out, "  %-15s %s conservative (5th percentile of %d runs), %s median\n", "SAFE TIME", a,
            mc->runs, b);
    /* the JSON keeps the name "floor"; the text says what technicians call it */
    fprintf(out, "  %-15s %s (%d of %d runs)\n", "binding limit",
            r->binding == LIMIT_FLOOR ? "cut-off voltage" : predict_limit_name(r->binding),
            mc->binding_count[r->binding], mc->runs);
    fprintf(out, "  %-15s SoC %.0f %%, %.2f V loaded (%.3f V/cell), %.1f A\n", "at the limit",
            r->soc_at_stop_pct, r->v_at_stop_v, r->v_at_stop_v / in->cells, r->i_at_stop_a);
    char c[40], d[40], e[40];
    mmss(a, sizeof a, r->t_reserve_s);
    mmss(c, sizeof c, r->t_floor_s);
    mmss(d, sizeof d, r->t_collapse_s);
    mmss(e, sizeof e, r->t_empty_s);
    fprintf(out, "  %-15s reserve %s, cut-off %s, collapse %s, empty %s (nominal run)\n",
            "each limit", a, c, d, e);
    if (isfinite(r->soc_after_pct))
        fprintf(out, "  %-15s SoC %.1f %%, %.2f V loaded\n", "after --for", r->soc_after_pct,
                r->v_after_v);
    for (int k = 0; k < nwarn; k++)
        fprintf(out, "  warning: %s\n", warn[k]);
    fprintf(out, "\nCaution: an estimate from logged data. It does not replace the aircraft's own\n"
                 "low-voltage protection, the pack maker's limits or your operation's rules.\n");
    return ferror(out) ? -1 : 0;
}
