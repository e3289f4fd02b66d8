#include "logopts.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

const char logopts_usage[] =
    "  --cut-off V            cut-off voltage per cell under load (default: per\n"
    "                         chemistry; --floor is the old name)\n"
    "reading the log:\n"
    "  --columns LIST         column layout for a log without a header, e.g.\n"
    "                         time_s,voltage_v,current_a ('-' skips a column)\n"
    "  --map LIST             override detection, e.g. voltage_v=VBAT,current_ma=3\n"
    "  --delimiter D          comma, semicolon, tab or one character (default: detected)\n"
    "  --decimal D            point or comma (default: detected)\n"
    "  --current-sign S       auto, discharge-positive or discharge-negative (default: auto)\n"
    "  --adc-scale A          amps per ADC count for a raw current column\n"
    "  --adc-offset COUNTS    ADC reading at zero current (default 0)\n"
    "  --adc-bits N --adc-vref V --sense-ratio R --sense-ohm OHM\n"
    "                         or the sense chain, from which amps per count follow\n"
    "analysis:\n"
    "  --gap S                intervals longer than this are reported as gaps\n"
    "                         (default: the larger of 1 s and 5 median intervals)\n"
    "  --rest-current A       |current| at or below this counts as rest\n"
    "                         (default: the larger of 0.05 A and 1 % of peak)\n"
    "  --fit M                robust (default) or ols (plain least squares)\n";

void logopts_init(struct log_cli *cli)
{
    memset(cli, 0, sizeof *cli);
    cli->an.chemistry = -1;
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

int logopts_take(int c, const char *v, struct log_cli *cli, struct pb_error *err)
{
    int bad = 0;
    switch (c) {
    case LO_FLOOR:
        bad = cmd_parse_double("--cut-off", v, 0.5, 5.0, &cli->an.floor_v, err);
        break;
    case LO_COLUMNS:
        cli->read.columns = v;
        break;
    case LO_MAP:
        cli->read.map = v;
        break;
    case LO_DELIM:
        bad = parse_char_choice("--delimiter", v, &cli->read.delimiter, err);
        break;
    case LO_DECIMAL:
        bad = parse_char_choice("--decimal", v, &cli->read.decimal, err);
        if (!bad && cli->read.decimal != '.' && cli->read.decimal != ',') {
            pb_error_set(err, PB_EUSAGE, "--decimal: expected point or comma, got '%s'", v);
            bad = 1;
        }
        break;
    case LO_SIGN: {
        static const char *const signs[] = {"auto", "discharge-positive", "discharge-negative",
                                            NULL};
        static const enum current_sign values[] = {SIGN_AUTO, SIGN_DISCHARGE_POSITIVE,
                                                   SIGN_DISCHARGE_NEGATIVE};
        int k = cmd_keyword("--current-sign", v, signs, err);
        bad = k < 0;
        if (!bad)
            cli->read.sign = values[k];
        break;
    }
    case LO_ADC_SCALE:
        bad = cmd_parse_double("--adc-scale", v, -1e6, 1e6, &cli->read.adc_a_per_count, err);
        cli->read.have_adc = 1;
        break;
    case LO_ADC_OFFSET:
        bad = cmd_parse_double("--adc-offset", v, -1e9, 1e9, &cli->read.adc_offset_counts, err);
        break;
    case LO_ADC_BITS:
        bad = cmd_parse_int("--adc-bits", v, 1, 32, &cli->adc_bits, err);
        break;
    case LO_ADC_VREF:
        bad = cmd_parse_double("--adc-vref", v, 1e-3, 100, &cli->adc_vref, err);
        break;
    case LO_SENSE_RATIO:
        bad = cmd_parse_double("--sense-ratio", v, 1e-6, 1e9, &cli->sense_ratio, err);
        break;
    case LO_SENSE_OHM:
        bad = cmd_parse_double("--sense-ohm", v, 1e-9, 1e9, &cli->sense_ohm, err);
        break;
    case LO_GAP:
        bad = cmd_parse_double("--gap", v, 1e-6, 1e9, &cli->an.gap_s, err);
        break;
    case LO_REST:
        bad = cmd_parse_double("--rest-current", v, 0.0, 1e4, &cli->an.rest_a, err);
        break;
    case LO_FIT: {
        static const char *const fits[] = {"robust", "ols", NULL};
        int k = cmd_keyword("--fit", v, fits, err);
        bad = k < 0;
        if (!bad)
            cli->an.plain_fit = k == 1;
        break;
    }
    case LO_CELLS:
        bad = cmd_parse_int("--cells", v, 1, PB_MAX_CELLS, &cli->an.cells, err);
        break;
    case LO_CHEM: {
        const struct chem_info *ch = ocv_chem_by_name(v);
        if (!ch) {
            pb_error_set(err, PB_EUSAGE, "--chemistry: expected lipo, lihv, nmc or lfp, got '%s'",
                         v);
            bad = 1;
        } else {
            cli->an.chemistry = (int)ch->id;
        }
        break;
    }
    case LO_CAP:
        bad = cmd_parse_double("--capacity", v, 1, 1e7, &cli->an.capacity_mah, err);
        break;
    default:
        return 0;
    }
    return bad ? -1 : 1;
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
    ro.rated_mah = cli->an.capacity_mah;
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
