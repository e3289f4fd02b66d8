#include "logopts.h"

#include <stddef.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

void logopts_init(struct log_cli *cli)
{
    memset(cli, 0, sizeof *cli);
    cli->an.chemistry = -1;
}

#define LOG_AT(field) offsetof(struct log_cli, field)

static const char *const signs[] = {"auto", "discharge-positive", "discharge-negative", NULL};
static const int sign_values[] = {SIGN_AUTO, SIGN_DISCHARGE_POSITIVE, SIGN_DISCHARGE_NEGATIVE};
static const char *const fits[] = {"robust", "ols", NULL};

/* clang-format off */
const struct opt logopts_table[] = {
    {.name = "cut-off", .alias = "floor", .kind = OPT_DOUBLE, .id = LO_FLOOR,
     .off = LOG_AT(an.floor_v), .lo = 0.5, .hi = 5.0, .meta = "V",
     .help = "cut-off voltage per cell under load (default: per chemistry)"},
    {.name = "columns", .kind = OPT_STRING, .id = LO_COLUMNS, .off = LOG_AT(read.columns),
     .meta = "LIST", .help = "column layout for a log without a header, e.g.\n"
     "time_s,voltage_v,current_a ('-' skips a column)"},
    {.name = "map", .kind = OPT_STRING, .id = LO_MAP, .off = LOG_AT(read.map), .meta = "LIST",
     .help = "override detection, e.g. voltage_v=VBAT,current_ma=3"},
    {.name = "delimiter", .kind = OPT_STRING, .id = LO_DELIM, .off = OPT_NOWHERE, .meta = "D",
     .help = "comma, semicolon, tab or one character (default: detected)"},
    {.name = "decimal", .kind = OPT_STRING, .id = LO_DECIMAL, .off = OPT_NOWHERE, .meta = "D",
     .help = "point or comma (default: detected)"},
    {.name = "current-sign", .kind = OPT_KEYWORD, .id = LO_SIGN, .off = LOG_AT(read.sign),
     .words = signs, .values = sign_values, .def = "auto", .meta = "S",
     .help = "auto, discharge-positive or discharge-negative"},
    {.name = "adc-scale", .kind = OPT_DOUBLE, .id = LO_ADC_SCALE,
     .off = LOG_AT(read.adc_a_per_count), .lo = -1e6, .hi = 1e6, .meta = "A",
     .help = "amps per ADC count for a raw current column"},
    {.name = "adc-offset", .kind = OPT_DOUBLE, .id = LO_ADC_OFFSET,
     .off = LOG_AT(read.adc_offset_counts), .lo = -1e9, .hi = 1e9, .def = "0", .meta = "COUNTS",
     .help = "ADC reading at zero current"},
    {.name = "adc-bits", .kind = OPT_INT, .id = LO_ADC_BITS, .off = LOG_AT(adc_bits), .lo = 1,
     .hi = 32, .meta = "N", .help = "or the sense chain, from which amps per count follow:\n"
     "ADC resolution,"},
    {.name = "adc-vref", .kind = OPT_DOUBLE, .id = LO_ADC_VREF, .off = LOG_AT(adc_vref),
     .lo = 1e-3, .hi = 100, .meta = "V", .help = "its reference voltage,"},
    {.name = "sense-ratio", .kind = OPT_DOUBLE, .id = LO_SENSE_RATIO, .off = LOG_AT(sense_ratio),
     .lo = 1e-6, .hi = 1e9, .meta = "R", .help = "the current sensor's ratio (I / sense current)"},
    {.name = "sense-ohm", .kind = OPT_DOUBLE, .id = LO_SENSE_OHM, .off = LOG_AT(sense_ohm),
     .lo = 1e-9, .hi = 1e9, .meta = "OHM", .help = "and its sense resistor"},
    {.name = "gap", .kind = OPT_DOUBLE, .id = LO_GAP, .off = LOG_AT(an.gap_s), .lo = 1e-6,
     .hi = 1e9, .meta = "S", .help = "intervals longer than this are reported as gaps\n"
     "(default: the larger of 1 s and 5 median intervals)"},
    {.name = "rest-current", .kind = OPT_DOUBLE, .id = LO_REST, .off = LOG_AT(an.rest_a),
     .lo = 0.0, .hi = 1e4, .meta = "A", .help = "|current| at or below this counts as rest\n"
     "(default: the larger of 0.05 A and 1 % of peak)"},
    {.name = "fit", .kind = OPT_KEYWORD, .id = LO_FIT, .off = LOG_AT(an.plain_fit), .words = fits,
     .def = "robust", .meta = "M", .help = "robust or ols (plain least squares)"},
    {0},
};

const struct opt logopts_pack_table[] = {
    {.name = "cells", .kind = OPT_INT, .id = LO_CELLS, .off = LOG_AT(an.cells), .lo = 1,
     .hi = PB_MAX_CELLS, .meta = "N",
     .help = "series cell count (default: from cell columns or inferred)"},
    {.name = "chemistry", .kind = OPT_STRING, .id = LO_CHEM, .off = OPT_NOWHERE, .meta = "C",
     .help = "lipo, lihv, nmc or lfp, any case (default: lipo, with a warning)"},
    {.name = "capacity", .kind = OPT_DOUBLE, .id = LO_CAP, .off = LOG_AT(an.capacity_mah),
     .lo = 1, .hi = 1e7, .meta = "MAH",
     .help = "rated capacity, for C-rates and capacity as % of rated"},
    {0},
};
/* clang-format on */

int logopts_is_reading(const struct opt *o)
{
    return o >= logopts_table && o < logopts_table + sizeof logopts_table / sizeof *logopts_table;
}

static int parse_char_choice(const char *opt, const char *v, char *out, struct pb_error *err)
{
    static const char *const names[] = {"comma", "semicolon", "tab", "point", NULL};
    static const char chars[] = {',', ';', '\t', '.'};
    if (strlen(v) == 1 && v[0] != '"' && v[0] != '\n') {
        *out = v[0];
        return 0;
    }
    int k = cmd_keyword(opt, v, names, err);
    if (k < 0) {
        pb_error_set(err, PB_EUSAGE,
                     "%s: expected comma, semicolon, tab, point or one character, got '%s'", opt,
                     v);
        return -1;
    }
    *out = chars[k];
    return 0;
}

int logopts_after(void *base, const struct opt *o, const char *v, struct pb_error *err)
{
    struct log_cli *cli = base;
    switch (o->id) {
    case LO_DELIM:
        return parse_char_choice("--delimiter", v, &cli->read.delimiter, err);
    case LO_DECIMAL:
        if (parse_char_choice("--decimal", v, &cli->read.decimal, err) != 0)
            return -1;
        if (cli->read.decimal != '.' && cli->read.decimal != ',') {
            pb_error_set(err, PB_EUSAGE, "--decimal: expected point or comma, got '%s'", v);
            return -1;
        }
        return 0;
    case LO_ADC_SCALE:
        cli->read.have_adc = 1;
        return 0;
    case LO_CHEM: {
        const struct chem_info *ch = ocv_chem_by_name(v);
        if (!ch) {
            pb_error_set(err, PB_EUSAGE, "--chemistry: expected lipo, lihv, nmc or lfp, got '%s'",
                         v);
            return -1;
        }
        cli->an.chemistry = (int)ch->id;
        return 0;
    }
    default:
        return 0;
    }
}

int logopts_take(int c, const char *v, struct log_cli *cli, struct pb_error *err)
{
    const struct opt *o = opt_by_id(logopts_table, c);
    if (!o)
        o = opt_by_id(logopts_pack_table, c);
    if (!o)
        return 0;
    if ((o->off != OPT_NOWHERE && opt_take(o, cli, v, err) != 0) ||
        logopts_after(cli, o, v, err) != 0)
        return -1;
    return 1;
}

enum pb_code logopts_finish(struct log_cli *cli, struct pb_error *err)
{
    int chain = cli->adc_bits || cli->adc_vref > 0 || cli->sense_ratio > 0 || cli->sense_ohm > 0;
    if (!chain)
        return PB_OK;
    if (!cli->adc_bits || !(cli->adc_vref > 0) || !(cli->sense_ratio > 0) || !(cli->sense_ohm > 0))
        return pb_error_set(err, PB_EUSAGE,
                            "the sense chain needs all of --adc-bits, --adc-vref, "
                            "--sense-ratio and --sense-ohm");
    if (cli->read.have_adc)
        return pb_error_set(err, PB_EUSAGE, "give --adc-scale or the sense chain, not both");
    cli->read.adc_a_per_count =
        logread_adc_a_per_count(cli->adc_bits, cli->adc_vref, cli->sense_ratio, cli->sense_ohm);
    cli->read.have_adc = 1;
    return PB_OK;
}

enum pb_code logopts_analyze(const char *path, const struct log_cli *cli,
                             struct logread_stats *stats, struct analysis **out,
                             struct series **series_out, struct pb_error *err)
{
    int is_stdin = strcmp(path, "-") == 0;
    const char *name = is_stdin ? "(stdin)" : path;
    struct series *s = NULL;
    struct analysis *a = NULL;
    enum pb_code rc = PB_OK;
    *out = NULL;
    FILE *fp = is_stdin ? stdin : cmd_open_log(path, err);
    if (!fp)
        return err->code;
    /* the pack's cell count and rating bound what a sample may hold */
    struct logread_opts ro = cli->read;
    ro.cells = cli->read_without_cells ? 0 : cli->an.cells;
    ro.pack_cells = cli->an.cells; /* a dropped cell column is still the pack's */
    ro.rated_mah = cli->an.capacity_mah;
    stage_begin(cli->an.stages, "read");
    s = logread_file(fp, name, &ro, stats, err);
    if (!s) {
        rc = err->code;
        goto cleanup;
    }
    a = analysis_new();
    if (!a) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    rc = analyze_series(s, stats, name, &cli->an, a, err);
    if (rc != PB_OK)
        goto cleanup;
    stage_begin(cli->an.stages, "checks");
    struct plausible pl;
    plausible_log(s, stats, name, cli->an.capacity_mah, &pl);
    for (size_t k = 0; k < pl.n; k++) {
        if (pl.f[k].impossible && cli->refuse_implausible) {
            rc = pb_error_set(err, PB_EINPUT, "%s: refused (--force takes it anyway)",
                              pl.f[k].message);
            goto cleanup;
        }
        analysis_add_warning(a, pl.f[k].code, pl.f[k].message);
    }
    *out = a;
    a = NULL;
    if (series_out) {
        *series_out = s;
        s = NULL;
    }
cleanup:
    if (!is_stdin)
        fclose(fp);
    analysis_free(a);
    series_free(s);
    return rc;
}
