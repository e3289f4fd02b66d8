/* packbook predict: safe flight time for the next sortie, from a pack's
 * history or from one log, with the landing reserve and its uncertainty. */
#include <getopt.h>
#include <gsl/gsl_cdf.h>
#include <jansson.h>
#include <math.h>
#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "../core/analyze.h"
#include "../core/logread.h"
#include "../core/predict.h"
#include "../core/socest.h"
#include "../core/utf8.h"
#include "../report/report.h"
#include "../report/report_predict.h"
#include "cmd.h"
#include "config.h"
#include "logopts.h"
#include "packopts.h"
#include "packview.h"

/* A help text reads best as the lines it prints. */
/* clang-format off */
static const char usage_head[] =
    "usage: packbook predict ID [options]\n"
    "       packbook predict --log LOG [--cells N --chemistry C --capacity MAH] [options]\n"
    "\n"
    "Simulates the pack from a start state under a load until the first of: SoC\n"
    "down to the landing reserve, loaded voltage down to the cut-off, or a power the\n"
    "pack cannot deliver (voltage collapse). Capacity, R0 and the load are drawn\n"
    "from their uncertainty (Monte Carlo, fixed seed); the conservative figure is\n"
    "the 5th percentile of the safe time. For a retired pack, or one flagged\n"
    "retire, that is said first.\n"
    "\n";
/* clang-format on */

#define MAX_PROFILES 16

struct predict_cli {
    struct log_cli log;
    struct packopts_seen seen; /* reading options given, over the settings file's */
    const char *log_path, *db, *id;
    const char *profiles[MAX_PROFILES];
    int nprofiles;
    double soc, ocv_v, power_w, current_a, reserve, temp_c, tref_c, ea, peuk, peukh, for_s;
    int runs, json, seed_n;
    unsigned long seed;
};

#define PRED_AT(field) offsetof(struct predict_cli, field)

/* clang-format off */
static const struct opt start_table[] = {
    {.name = "soc", .kind = OPT_DOUBLE, .off = PRED_AT(soc), .lo = 0, .hi = 100, .meta = "PCT",
     .help = "start SoC (default 100: a full charge)"},
    {.name = "ocv", .kind = OPT_DOUBLE, .off = PRED_AT(ocv_v), .lo = 0.5, .hi = 200, .meta = "V",
     .help = "or the pack voltage measured at rest"},
    {0},
};

static const struct opt load_table[] = {
    {.name = "power", .kind = OPT_DOUBLE, .off = PRED_AT(power_w), .lo = 0, .hi = 1e6,
     .meta = "W", .help = "constant power"},
    {.name = "current", .kind = OPT_DOUBLE, .off = PRED_AT(current_a), .lo = 0, .hi = 1e5,
     .meta = "A", .help = "or constant current"},
    {.name = "profile", .kind = OPT_PATH, .off = OPT_NOWHERE, .meta = "LOG",
     .help = "or the power of a logged flight, repeated (may be given again:\n"
     "the profiles are flown one after the other)"},
    {0},
};

static const struct opt model_table[] = {
    {.name = "temp", .kind = OPT_DOUBLE, .off = PRED_AT(temp_c), .lo = -60, .hi = 90, .meta = "C",
     .help = "pack temperature: R0 is scaled by the Arrhenius form"},
    {.name = "tref", .kind = OPT_DOUBLE, .off = PRED_AT(tref_c), .lo = -60, .hi = 90,
     .def = "25", .meta = "C", .help = "temperature R0 was measured at"},
    {.name = "ea", .kind = OPT_DOUBLE, .off = PRED_AT(ea), .lo = 0, .hi = 500000, .def = "30000",
     .meta = "J_PER_MOL", .help = "activation energy for R(T)"},
    {.name = "peukert", .kind = OPT_DOUBLE, .off = PRED_AT(peuk), .lo = 1.0, .hi = 2.0,
     .meta = "K", .help = "Peukert exponent (rated-capacity form t = H (C/(I H))^K)"},
    {.name = "peukert-hours", .kind = OPT_DOUBLE, .off = PRED_AT(peukh), .lo = 0.01, .hi = 1000,
     .def = "1", .meta = "H", .help = "rated discharge time H for Peukert"},
    /* 5000 runs put the 5th percentile within about 0.3 % (binomial standard
     * error); more only costs time (each run can step through 6 h) */
    {.name = "runs", .kind = OPT_INT, .off = PRED_AT(runs), .lo = 10, .hi = PREDICT_RUNS_MAX,
     .def = "400", .meta = "N", .help = "Monte Carlo runs"},
    {.name = "seed", .kind = OPT_INT, .off = PRED_AT(seed_n), .lo = 0, .hi = 2000000000,
     .def = "1", .meta = "N", .help = "Monte Carlo seed"},
    /* the simulator stops at its horizon: a state later than that is never known */
    {.name = "for", .kind = OPT_DOUBLE, .off = PRED_AT(for_s), .lo = 0.001,
     .hi = PREDICT_HORIZON_S, .meta = "S", .help = "also report the state after S seconds"},
    {.name = "log", .kind = OPT_PATH, .off = PRED_AT(log_path), .meta = "LOG",
     .help = "predict from one log instead of a pack's history"},
    {.name = "db", .kind = OPT_PATH, .off = PRED_AT(db), .meta = "PATH",
     .help = "history database (see 'packbook config')"},
    {.name = "json", .kind = OPT_FLAG, .off = PRED_AT(json), .set = 1,
     .help = "JSON on standard output"},
    {0},
};
/* clang-format on */

static int predict_hook(void *ctx, const struct opt *o, const char *v, struct pb_error *err)
{
    struct predict_cli *cli = ctx;
    if (logopts_is_reading(o))
        return packopts_note(&cli->seen, o->id, v, err) < 0 ? -1 : 0;
    /* no load is no flight: 0 W "lasted" the simulator's whole horizon */
    if (o == &load_table[0] && !(cli->power_w > 0))
        return pb_error_set(err, PB_EUSAGE, "--power: expected a load above 0 W, got '%s'", v);
    if (o == &load_table[1] && !(cli->current_a > 0))
        return pb_error_set(err, PB_EUSAGE, "--current: expected a load above 0 A, got '%s'", v);
    if (o == &load_table[2]) {
        if (cli->nprofiles == MAX_PROFILES)
            return pb_error_set(err, PB_EUSAGE, "--profile: at most %d", MAX_PROFILES);
        cli->profiles[cli->nprofiles++] = v;
    }
    return 0;
}

static double median_sd(const double *v, size_t n, double *sd)
{
    double buf[64];
    size_t m = 0;
    for (size_t k = 0; k < n && m < 64; k++)
        if (isfinite(v[k]))
            buf[m++] = v[k];
    if (!m) {
        *sd = NAN;
        return NAN;
    }
    double mean = 0, ss = 0;
    for (size_t k = 0; k < m; k++)
        mean += buf[k] / (double)m; /* counts convert exactly (far below 2^53) */
    for (size_t k = 0; k < m; k++)
        ss += (buf[k] - mean) * (buf[k] - mean);
    *sd = m > 1 ? sqrt(ss / (double)(m - 1)) : 0.0;
    qsort(buf, m, sizeof *buf, cmd_cmp_double);
    return m % 2 ? buf[m / 2] : 0.5 * (buf[m / 2 - 1] + buf[m / 2]);
}

/* The capacity the next flight will have, from the pack's trend: a straight
 * line through the last (up to NEXT_CAP_FLIGHTS) capacities against flight
 * number, at the next flight, with the spread set so that the Monte Carlo's
 * 5th percentile is the lower end of the one-sided 95 % prediction interval
 * of one new value (Student t, n - 2 dof; the textbook prediction interval
 * of simple regression). A fading pack's next flight is weaker than the
 * median of its recent ones, and the flight-to-flight scatter is wider than
 * each measurement's own interval: the conservative time must allow for
 * both. Needs 4 capacities; else the caller's median stands. */
#define NEXT_CAP_FLIGHTS 10

/* The value of y at x0 from a straight line through (x, y) (m points, m >=
 * 4), and the spread for a normal draw whose 5th percentile is the lower
 * end of the one-sided 95 % prediction interval of one new value (Student
 * t, m - 2 dof; the textbook prediction interval of simple regression),
 * widened for the residuals' lag-1 autocorrelation rho > 0 (variance times
 * (1 + rho) / (1 - rho)), x in time order or reversed. Returns 0, or -1
 * when the line cannot be fitted. */
static int next_value(const double *x, const double *y, size_t m, double x0, double *mean,
                      double *sd)
{
    if (m < 4)
        return -1;
    struct line_fit l = health_line(x, y, m, 1);
    if (!l.ok)
        return -1;
    *mean = l.a + l.b * x0;
    double var_mean = l.cov_aa + 2.0 * x0 * l.cov_ab + x0 * x0 * l.cov_bb;
    double se_new = sqrt(l.sigma * l.sigma + fmax(var_mean, 0.0));
    double s01 = 0.0, s00 = 0.0, prev = NAN;
    for (size_t j = 0; j < m; j++) {
        double r = y[j] - (l.a + l.b * x[j]);
        if (isfinite(prev))
            s01 += r * prev;
        s00 += r * r;
        prev = r;
    }
    double rho = s00 > 0.0 ? s01 / s00 : 0.0;
    if (rho > 0.0)
        se_new *= sqrt((1.0 + rho) / (1.0 - fmin(rho, 0.9)));
    /* z(0.95) = 1.6449: the normal's 5th percentile lands on the t bound */
    *sd = gsl_cdf_tdist_Pinv(0.95, (double)m - 2.0) * se_new / 1.6449;
    return isfinite(*mean) && isfinite(*sd) ? 0 : -1;
}

/* The capacity the next flight will have, from the pack's trend: the line
 * through the last (up to NEXT_CAP_FLIGHTS) capacities against flight
 * number, at the next flight (next_value). A fading pack's next flight is
 * weaker than the median of its recent ones, and the flight-to-flight
 * scatter (with its streaks: a rest lets capacity recover, then it fades
 * again) is wider than each measurement's own interval; the conservative
 * time must allow for both. Fewer than 4 capacities: the caller's median. */
static void next_capacity(const struct pack_view *v, struct predict_inputs *in)
{
    double x[NEXT_CAP_FLIGHTS], y[NEXT_CAP_FLIGHTS], mean, sd;
    size_t m = 0;
    for (size_t k = v->nflights; k > 0 && m < NEXT_CAP_FLIGHTS; k--) {
        double c = v->flights[k - 1].capacity_mah;
        if (!(c > 0.0))
            continue;
        x[m] = (double)k;
        y[m] = c;
        m++;
    }
    if (next_value(x, y, m, (double)v->nflights + 1.0, &mean, &sd) != 0 || !(mean > 0.0))
        return;
    in->capacity_mah = mean;
    /* never tighter than one measurement's own interval (the caller's) */
    in->capacity_sd_mah = fmax(sd, in->capacity_sd_mah);
}

/* The pack's voltage offset (predict_voltage_offset) over its last (up to
 * NEXT_CAP_FLIGHTS) flights: their median, spread by their standard
 * deviation (3 or more) or else by the allowances SoC is read with (the
 * table's spread and the polarisation a model misses, 95 % half-widths). */
static void voltage_offset(const struct pack_view *v, struct predict_inputs *in)
{
    double off[NEXT_CAP_FLIGHTS];
    size_t m = 0;
    for (size_t k = v->nflights; k > 0 && m < NEXT_CAP_FLIGHTS; k--) {
        const struct flight_rec *f = &v->flights[k - 1];
        double cap = f->capacity_mah > 0.0 ? f->capacity_mah : in->capacity_mah;
        double vm = f->energy_used_wh * 1000.0 / f->charge_used_mah;
        double r = f->r0_mohm + (isfinite(f->r1_mohm) ? f->r1_mohm : 0.0);
        double o =
            predict_voltage_offset(in->chem, in->cells, cap, f->soc_start_pct, f->charge_used_mah,
                                   f->energy_used_wh, f->power_cruise_w / vm, r / 1000.0);
        if (isfinite(o))
            off[m++] = o;
    }
    double allowance = hypot(SOCEST_TABLE_V, SOCEST_LOADED_V) / 1.96;
    double sd;
    in->v_offset_v = m ? median_sd(off, m, &sd) : 0.0;
    in->v_offset_sd_v = m >= 3 ? sd : allowance;
}

/* Better than voltage_offset where the store has them: the recent flights'
 * own sag-corrected OCV trends (their stored reports) against the table over
 * the SoC span the prediction crosses, [soc_lo, soc_hi]. A generic table's
 * shape can differ from a cell's by tens of mV in one part of the curve and
 * not in another, so the mean over the whole flight is not enough. */
static void curve_offset(struct store *st, const struct pack_view *v, struct predict_inputs *in,
                         double soc_lo, double soc_hi)
{
    double off[NEXT_CAP_FLIGHTS], idx[NEXT_CAP_FLIGHTS];
    size_t m = 0, tried = 0;
    for (size_t k = v->nflights; k > 0 && tried < NEXT_CAP_FLIGHTS; k--, tried++) {
        const struct flight_rec *f = &v->flights[k - 1];
        char *text = NULL;
        if (store_flight_report(st, f->id, &text, NULL) != PB_OK || !text)
            continue;
        json_t *doc = json_loads(text, 0, NULL);
        free(text);
        json_t *fit = doc ? json_object_get(doc, "fit") : NULL;
        json_t *coef = fit ? json_object_get(fit, "ocv_coef_v") : NULL;
        double c[OCV_POLY_MAX];
        size_t nc = json_is_array(coef) ? json_array_size(coef) : 0;
        for (size_t j = 0; j < nc && j < OCV_POLY_MAX; j++)
            c[j] = json_number_value(json_array_get(coef, j));
        double q_end = fit ? json_number_value(json_object_get(fit, "q_end_ah")) : NAN;
        double cap = f->capacity_mah > 0.0 ? f->capacity_mah : in->capacity_mah;
        double o = nc >= 1 && nc <= OCV_POLY_MAX
                       ? predict_curve_offset(in->chem, in->cells, c, (int)nc - 1, q_end,
                                              f->soc_start_pct, cap, soc_lo, soc_hi)
                       : NAN;
        json_decref(doc);
        if (isfinite(o)) {
            idx[m] = (double)k;
            off[m++] = o;
        }
    }
    if (m == 0)
        return;
    /* like capacity: the next flight's value from the recent trend (an
     * ageing cell sags more every flight), else their median */
    double sd, mean;
    if (next_value(idx, off, m, (double)v->nflights + 1.0, &mean, &sd) == 0) {
        in->v_offset_v = mean;
        in->v_offset_sd_v = sd;
        return;
    }
    in->v_offset_v = median_sd(off, m, &sd);
    if (m >= 3)
        in->v_offset_sd_v = sd;
}

/* From the last (up to HEALTH_RECENT_FLIGHTS) flights of a pack: the same
 * flights the health view calls "now". */
static enum pb_code inputs_from_history(const struct pack_view *v, struct predict_inputs *in,
                                        struct pb_error *err)
{
    enum { N = HEALTH_RECENT_FLIGHTS };
    double cap[N], capci[N], r0[N], r0ci[N], r1[N], tau[N], pw[N];
    size_t m = 0;
    for (size_t k = v->nflights; k > 0 && m < N; k--, m++) {
        const struct flight_rec *f = &v->flights[k - 1];
        cap[m] = f->capacity_mah;
        capci[m] = f->capacity_ci95_mah;
        r0[m] = f->r0_mohm;
        r0ci[m] = f->r0_ci95_mohm;
        r1[m] = f->r1_mohm;
        tau[m] = f->tau_s;
        pw[m] = f->power_cruise_w;
    }
    double sd, ci_sd;
    memset(in, 0, sizeof *in);
    in->chem = ocv_chem_by_name(v->pack.chemistry);
    if (!in->chem)
        return pb_error_set(err, PB_ESTORE,
                            "pack '%s' has an unknown chemistry '%s' in the database",
                            v->pack.label, v->pack.chemistry);
    in->cells = v->pack.cells;
    in->rated_mah = v->pack.capacity_mah;
    if (m == 1)
        snprintf(in->source, sizeof in->source, "the one flight of pack %s", v->pack.label);
    else
        snprintf(in->source, sizeof in->source, "the last %zu flights of pack %s", m,
                 v->pack.label);
    in->capacity_mah = median_sd(cap, m, &sd);
    double ci = median_sd(capci, m, &ci_sd);
    in->capacity_sd_mah = fmax(isfinite(sd) ? sd : 0.0, isfinite(ci) ? ci / 1.96 : 0.0);
    next_capacity(v, in);
    voltage_offset(v, in);
    if (!isfinite(in->capacity_mah)) {
        in->capacity_mah = v->pack.capacity_mah;
        in->capacity_sd_mah = 0.05 * v->pack.capacity_mah;
        in->capacity_assumed = 1;
    }
    in->r0_mohm = median_sd(r0, m, &sd);
    ci = median_sd(r0ci, m, &ci_sd);
    in->r0_sd_mohm = fmax(isfinite(sd) ? sd : 0.0, isfinite(ci) ? ci / 1.96 : 0.0);
    in->r1_mohm = median_sd(r1, m, &sd);
    in->tau_s = median_sd(tau, m, &sd);
    in->power_w = median_sd(pw, m, &in->power_sd_w);
    if (!isfinite(in->r0_mohm))
        return pb_error_set(err, PB_EUSAGE,
                            "pack '%s' has no flight with a known resistance: "
                            "nothing to predict from (import flights with load changes)",
                            v->pack.label);
    return PB_OK;
}

/* From one analysed log. */
static void inputs_from_analysis(const struct analysis *a, double rated_mah, const char *name,
                                 struct predict_inputs *in)
{
    memset(in, 0, sizeof *in);
    in->chem = a->chem;
    in->cells = a->cells;
    in->rated_mah = rated_mah;
    snprintf(in->source, sizeof in->source, "the log %s", name);
    in->capacity_mah = a->capacity_mah.value;
    in->capacity_sd_mah = a->capacity_mah.ci95 / 1.96;
    if (!isfinite(in->capacity_mah) && rated_mah > 0) {
        in->capacity_mah = rated_mah;
        in->capacity_sd_mah = 0.05 * rated_mah;
        in->capacity_assumed = 1;
    }
    in->r0_mohm = a->r0_mohm.value;
    in->r0_sd_mohm = a->r0_mohm.ci95 / 1.96;
    in->r1_mohm = a->r1_mohm.value;
    in->tau_s = a->tau_s.value;
    in->power_w = a->power_cruise_w;
    in->power_sd_w = 0.0;
    double r = a->r0_mohm.value + (isfinite(a->r1_mohm.value) ? a->r1_mohm.value : 0.0);
    double vm = a->energy_used_wh * 1000.0 / a->charge_used_mah;
    double off = predict_voltage_offset(a->chem, a->cells, in->capacity_mah, a->soc_start_pct.value,
                                        a->charge_used_mah, a->energy_used_wh,
                                        a->power_cruise_w / vm, r / 1000.0);
    in->v_offset_v = isfinite(off) ? off : 0.0;
    in->v_offset_sd_v = hypot(SOCEST_TABLE_V, SOCEST_LOADED_V) / 1.96;
}

static void setup(const struct predict_inputs *in, const struct predict_cli *cli,
                  struct predict_pack *p, struct predict_opts *o, struct predict_spread *sp)
{
    memset(p, 0, sizeof *p);
    /* every field, load_sd included: a load given as an option has no spread */
    memset(sp, 0, sizeof *sp);
    p->chem = in->chem;
    p->cells = in->cells;
    p->capacity_ah = in->capacity_mah / 1000.0;
    p->r0_ohm = in->r0_mohm / 1000.0;
    if (isfinite(in->r1_mohm) && isfinite(in->tau_s)) {
        p->r1_ohm = in->r1_mohm / 1000.0;
        p->tau_s = in->tau_s;
    }
    p->t_ref_c = cli ? cli->tref_c : 25.0;
    p->v_offset_v = isfinite(in->v_offset_v) ? in->v_offset_v : 0.0;
    predict_opts_default(o);
    sp->v_offset_sd_v = isfinite(in->v_offset_sd_v) ? in->v_offset_sd_v : 0.0;
    sp->capacity_sd_ah = in->capacity_sd_mah / 1000.0;
    sp->r0_sd_ohm = isfinite(in->r0_sd_mohm) ? in->r0_sd_mohm / 1000.0 : 0.0;
    sp->runs = 400;
    sp->seed = 1;
    o->reserve_pct = config_reserve();
    if (!cli)
        return;
    if (isfinite(cli->soc))
        o->soc0_pct = cli->soc;
    if (isfinite(cli->ocv_v))
        o->soc0_pct = ocv_to_soc(in->chem, cli->ocv_v / in->cells, NULL);
    o->reserve_pct = cli->reserve;
    if (cli->log.an.floor_v > 0)
        o->floor_v = cli->log.an.floor_v;
    o->temp_c = cli->temp_c;
    o->ea_j_mol = cli->ea;
    o->peukert_k = cli->peuk;
    o->peukert_h = cli->peukh;
    o->stop_after_s = cli->for_s;
    sp->runs = cli->runs;
    sp->seed = cli->seed;
}

enum pb_code predict_view(const struct pack_view *v, double power_w, struct predict_inputs *in,
                          struct predict_mc *mc, struct pb_error *err)
{
    enum pb_code rc = inputs_from_history(v, in, err);
    if (rc != PB_OK)
        return rc;
    struct predict_pack p;
    struct predict_opts o;
    struct predict_spread sp;
    setup(in, NULL, &p, &o, &sp);
    struct predict_load l = {.kind = LOAD_POWER,
                             .power_w = isfinite(power_w) ? power_w : in->power_w};
    sp.load_sd = isfinite(power_w) ? 0.0 : (isfinite(in->power_sd_w) ? in->power_sd_w : 0.0);
    sp.runs = 200;
    if (!isfinite(l.power_w))
        return pb_error_set(err, PB_EUSAGE,
                            "pack '%s': no cruise power in its history: give --power",
                            v->pack.label);
    if (predict_monte_carlo(&p, &l, &o, &sp, mc) != 0)
        return pb_error_set(err, PB_ENUMERIC, "pack '%s': the simulation failed", v->pack.label);
    return PB_OK;
}

/* Reads a log's power (V x I) as a profile from its start. */
static enum pb_code load_profiles(const struct predict_cli *cli, double **t, double **w, size_t *n,
                                  double *period, struct pb_error *err)
{
    *t = *w = NULL;
    *n = 0;
    *period = 0.0;
    for (int k = 0; k < cli->nprofiles; k++) {
        FILE *fp = cmd_open_log(cli->profiles[k], err);
        if (!fp)
            return err->code;
        struct logread_stats st;
        struct series *s = logread_file(fp, cli->profiles[k], &cli->log.read, &st, err);
        fclose(fp);
        if (!s)
            return err->code;
        if (!s->i_a) {
            series_free(s);
            return pb_error_set(err, PB_EINPUT, "%s: a load profile needs a current column",
                                cli->profiles[k]);
        }
        double *nt = realloc(*t, (*n + s->n) * sizeof *nt);
        double *nw = nt ? realloc(*w, (*n + s->n) * sizeof *nw) : NULL;
        if (!nt || !nw) {
            if (nt)
                *t = nt;
            series_free(s);
            return pb_error_set(err, PB_ENOMEM, "out of memory");
        }
        *t = nt;
        *w = nw;
        for (size_t j = 0; j < s->n; j++) {
            (*t)[*n + j] = *period + s->t_s[j];
            (*w)[*n + j] = fmax(0.0, s->v_v[j] * s->i_a[j]);
        }
        *n += s->n;
        double dt = s->n > 1 ? s->t_s[s->n - 1] / (double)(s->n - 1) : 1.0;
        *period += s->t_s[s->n - 1] + dt;
        series_free(s);
    }
    return PB_OK;
}

enum pb_code cmd_predict(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct predict_cli cli = {0};
    (void)app;
    logopts_init(&cli.log);
    cli.soc = cli.ocv_v = cli.power_w = cli.current_a = cli.temp_c = NAN;
    opt_defaults(start_table, &cli);
    opt_defaults(load_table, &cli);
    opt_defaults(config_reserve_table, &cli.reserve);
    opt_defaults(model_table, &cli);
    cli.reserve = config_reserve(); /* the settings file's, else the table's default */
    int done = 0;
    struct opt_cmd cmd = {"predict",
                          usage_head,
                          NULL,
                          {{"start:", start_table, &cli, NULL},
                           {"load (default: the median cruise power of the last " HEALTH_STR(
                                HEALTH_RECENT_FLIGHTS) " flights, or of the log):",
                            load_table, &cli, NULL},
                           {"limits:", config_reserve_table, &cli.reserve, NULL},
                           {"model:", model_table, &cli, NULL},
                           LOGOPTS_PACK_GROUP(&cli.log, "the pack of --log:"),
                           LOGOPTS_GROUP(&cli.log)},
                          6,
                          predict_hook,
                          &cli};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    cli.seed = (unsigned long)cli.seed_n;
    enum pb_code rc = logopts_finish(&cli.log, err);
    if (rc != PB_OK)
        return rc;
    int loads = isfinite(cli.power_w) + isfinite(cli.current_a) + (cli.nprofiles > 0);
    if (loads > 1)
        return pb_error_set(err, PB_EUSAGE, "predict: give one of --power, --current or --profile");
    if (isfinite(cli.soc) && isfinite(cli.ocv_v))
        return pb_error_set(err, PB_EUSAGE, "predict: give --soc or --ocv, not both");
    if (!cli.log_path) {
        if (optind + 1 != argc)
            return pb_error_set(err, PB_EUSAGE, "predict: give one pack ID, or --log LOG");
        cli.id = argv[optind];
    } else if (optind != argc) {
        return pb_error_set(err, PB_EUSAGE, "predict: --log and a pack ID do not go together");
    }

    struct predict_inputs in;
    struct store *st = NULL;
    struct pack_view view = {0};
    struct analysis *a = NULL;
    double *pt = NULL, *pw = NULL;
    const char *warn[8];
    int nwarn = 0;
    char status_line[1024] = "";
    if (cli.id) {
        struct pack_rec p;
        struct health_rules rules;
        config_rules(&rules);
        if ((rc = packview_open_store(cli.db, STORE_READ, &st, err)) != PB_OK ||
            (rc = store_pack_get(st, cli.id, &p, err)) != PB_OK ||
            (rc = packview_load(st, &p, &rules, TREND_WEEK, 0, 1000, &view, err)) != PB_OK ||
            (rc = inputs_from_history(&view, &in, err)) != PB_OK)
            goto cleanup;
        curve_offset(st, &view, &in, cli.reserve, isfinite(cli.soc) ? cli.soc : 100.0);
        /* the pack's remembered cut-off, unless --floor was given */
        struct log_cli remembered;
        logopts_init(&remembered);
        if ((rc = packopts_apply(p.settings, NULL, &remembered, err)) != PB_OK)
            goto cleanup;
        if (!(cli.log.an.floor_v > 0) && remembered.an.floor_v > 0)
            cli.log.an.floor_v = remembered.an.floor_v;
        /* said first: a figure for a pack that should not fly is read as leave to fly it */
        if (p.retired_at[0]) {
            snprintf(status_line, sizeof status_line,
                     "pack %s is RETIRED (%s, %.10s): do not fly it; figures for reference only",
                     p.label, p.retire_reason, p.retired_at);
            warn[nwarn++] = "this pack is retired";
        } else if (view.health.status == HEALTH_RETIRE) {
            snprintf(status_line, sizeof status_line,
                     "pack %s is flagged for RETIREMENT (%s): inspect it before flying; figures "
                     "for reference only",
                     p.label, view.health.reason);
            warn[nwarn++] = "this pack is flagged for retirement";
        }
    } else {
        struct logread_stats stats;
        /* the settings file's reading defaults under the options given */
        if ((rc = packopts_apply(NULL, &cli.seen, &cli.log, err)) != PB_OK ||
            (rc = logopts_analyze(cli.log_path, &cli.log, &stats, &a, NULL, err)) != PB_OK)
            goto cleanup;
        if (a->cells <= 0 || !isfinite(a->r0_mohm.value)) {
            rc = pb_error_set(err, PB_EUSAGE, "%s: %s: cannot predict from this log", cli.log_path,
                              a->cells <= 0 ? "the cell count is unknown (give --cells)"
                                            : "its resistance is unknown (see 'packbook analyze')");
            goto cleanup;
        }
        inputs_from_analysis(a, cli.log.an.capacity_mah, cli.log_path, &in);
        if (!isfinite(in.capacity_mah)) {
            rc = pb_error_set(err, PB_EUSAGE, "%s: no capacity estimate: give --capacity",
                              cli.log_path);
            goto cleanup;
        }
    }
    if (in.capacity_assumed)
        warn[nwarn++] = "no capacity estimate: the rated capacity is used with a 5 % spread";

    struct predict_pack p;
    struct predict_opts o;
    struct predict_spread sp;
    setup(&in, &cli, &p, &o, &sp);
    struct predict_load l = {.kind = LOAD_POWER};
    if (isfinite(cli.power_w)) {
        l.power_w = cli.power_w;
    } else if (isfinite(cli.current_a)) {
        l.kind = LOAD_CURRENT;
        l.current_a = cli.current_a;
    } else if (cli.nprofiles) {
        l.kind = LOAD_PROFILE;
        if ((rc = load_profiles(&cli, &pt, &pw, &l.prof_n, &l.prof_period_s, err)) != PB_OK)
            goto cleanup;
        l.prof_t_s = pt;
        l.prof_w = pw;
    } else {
        if (!isfinite(in.power_w)) {
            rc = pb_error_set(err, PB_EUSAGE, "no cruise power known from %s: give --power W",
                              in.source);
            goto cleanup;
        }
        l.power_w = in.power_w;
        sp.load_sd = isfinite(in.power_sd_w) ? in.power_sd_w : 0.0;
    }
    struct predict_run r;
    struct predict_mc mc;
    if (predict_run(&p, &l, &o, &r) != 0 || predict_monte_carlo(&p, &l, &o, &sp, &mc) != 0) {
        rc = pb_error_set(err, PB_ENUMERIC, "the simulation failed for these inputs");
        goto cleanup;
    }
    if (r.binding == LIMIT_COLLAPSE)
        warn[nwarn++] = "the pack cannot deliver this power down to the reserve: voltage collapse";
    if (r.t_safe_s <= 0.0)
        warn[nwarn++] = "a limit is reached at the start: do not fly this load from this state";
    if (status_line[0] && !cli.json) {
        char shown[4 * sizeof status_line];
        printf("%s\n\n", utf8_printable(shown, sizeof shown, status_line));
    }
    int wrc = cli.json ? report_predict_json(stdout, &in, &l, sp.load_sd, &o, &r, &mc, warn, nwarn)
                       : report_predict_text(stdout, &in, &l, sp.load_sd, &o, &r, &mc, warn, nwarn);
    rc = wrc ? pb_error_set(err, PB_EOUTPUT, "cannot write the output") : cmd_finish_stdout(err);
cleanup:
    free(pt);
    free(pw);
    analysis_free(a);
    pack_view_release(&view);
    store_close(st);
    return rc;
}
