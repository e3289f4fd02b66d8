#include <getopt.h>
#include <stdio.h>
#include <string.h>

#include "../core/analyze.h"
#include "../core/logread.h"
#include "../report/report.h"
#include "cmd.h"

static const char usage[] =
    "usage: packbook analyze [options] LOG\n"
    "\n"
    "Reads one flight log (CSV; '-' for standard input) and reports charge and\n"
    "energy used, internal resistance, open-circuit voltage, state of charge,\n"
    "capacity and per-cell figures.\n"
    "\n"
    "pack:\n"
    "  --cells N              series cell count (default: from cell columns or inferred)\n"
    "  --chemistry C          lipo, lihv, nmc or lfp (default: lipo, with a warning)\n"
    "  --capacity MAH         rated capacity, for C-rates and capacity as %% of rated\n"
    "  --floor V              loaded per-cell voltage floor (default: per chemistry)\n"
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
    "                         (default: the larger of 0.05 A and 1 %% of peak)\n"
    "  --fit M                robust (default) or ols (plain least squares)\n"
    "output:\n"
    "  --json                 one JSON document on standard output\n"
    "  -h, --help             this text\n";

enum {
    OPT_CELLS = 256, OPT_CHEM, OPT_CAP, OPT_FLOOR, OPT_COLUMNS, OPT_MAP, OPT_DELIM, OPT_DECIMAL,
    OPT_SIGN, OPT_ADC_SCALE, OPT_ADC_OFFSET, OPT_ADC_BITS, OPT_ADC_VREF, OPT_SENSE_RATIO,
    OPT_SENSE_OHM, OPT_GAP, OPT_REST, OPT_FIT, OPT_JSON,
};

static const struct option longopts[] = {
    {"cells", required_argument, NULL, OPT_CELLS},
    {"chemistry", required_argument, NULL, OPT_CHEM},
    {"capacity", required_argument, NULL, OPT_CAP},
    {"floor", required_argument, NULL, OPT_FLOOR},
    {"columns", required_argument, NULL, OPT_COLUMNS},
    {"map", required_argument, NULL, OPT_MAP},
    {"delimiter", required_argument, NULL, OPT_DELIM},
    {"decimal", required_argument, NULL, OPT_DECIMAL},
    {"current-sign", required_argument, NULL, OPT_SIGN},
    {"adc-scale", required_argument, NULL, OPT_ADC_SCALE},
    {"adc-offset", required_argument, NULL, OPT_ADC_OFFSET},
    {"adc-bits", required_argument, NULL, OPT_ADC_BITS},
    {"adc-vref", required_argument, NULL, OPT_ADC_VREF},
    {"sense-ratio", required_argument, NULL, OPT_SENSE_RATIO},
    {"sense-ohm", required_argument, NULL, OPT_SENSE_OHM},
    {"gap", required_argument, NULL, OPT_GAP},
    {"rest-current", required_argument, NULL, OPT_REST},
    {"fit", required_argument, NULL, OPT_FIT},
    {"json", no_argument, NULL, OPT_JSON},
    {"help", no_argument, NULL, 'h'},
    {NULL, 0, NULL, 0},
};

struct analyze_cli {
    struct logread_opts read;
    struct analyze_opts an;
    int json;
    int adc_bits;
    double adc_vref, sense_ratio, sense_ohm;
    const char *path;
};

static int parse_char_choice(const char *opt, const char *v, char *out, struct pb_error *err)
{
    if (strcmp(v, "comma") == 0)
        *out = ',';
    else if (strcmp(v, "semicolon") == 0)
        *out = ';';
    else if (strcmp(v, "tab") == 0)
        *out = '\t';
    else if (strcmp(v, "point") == 0)
        *out = '.';
    else if (strlen(v) == 1 && v[0] != '"' && v[0] != '\n')
        *out = v[0];
    else {
        pb_error_set(err, PB_EUSAGE, "%s: expected comma, semicolon, tab, point or one character, "
                     "got '%s'", opt, v);
        return -1;
    }
    return 0;
}

/* Fills cli from argv; sets *done when --help was printed instead. */
static enum pb_code parse_args(int argc, char **argv, struct analyze_cli *cli, int *done,
                               struct pb_error *err)
{
    int c;
    optind = 1;
    opterr = 0;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        const char *v = optarg;
        int bad = 0;
        switch (c) {
        case OPT_CELLS: bad = cmd_parse_int("--cells", v, 1, PB_MAX_CELLS, &cli->an.cells, err); break;
        case OPT_CHEM: {
            const struct chem_info *ch = ocv_chem_by_name(v);
            if (!ch)
                return pb_error_set(err, PB_EUSAGE,
                                    "--chemistry: expected lipo, lihv, nmc or lfp, got '%s'", v);
            cli->an.chemistry = (int)ch->id;
            break;
        }
        case OPT_CAP: bad = cmd_parse_double("--capacity", v, 1, 1e7, &cli->an.capacity_mah, err); break;
        case OPT_FLOOR: bad = cmd_parse_double("--floor", v, 0.5, 5.0, &cli->an.floor_v, err); break;
        case OPT_COLUMNS: cli->read.columns = v; break;
        case OPT_MAP: cli->read.map = v; break;
        case OPT_DELIM: bad = parse_char_choice("--delimiter", v, &cli->read.delimiter, err); break;
        case OPT_DECIMAL:
            bad = parse_char_choice("--decimal", v, &cli->read.decimal, err);
            if (!bad && cli->read.decimal != '.' && cli->read.decimal != ',')
                return pb_error_set(err, PB_EUSAGE, "--decimal: expected point or comma, got '%s'", v);
            break;
        case OPT_SIGN:
            if (strcmp(v, "auto") == 0)
                cli->read.sign = SIGN_AUTO;
            else if (strcmp(v, "discharge-positive") == 0)
                cli->read.sign = SIGN_DISCHARGE_POSITIVE;
            else if (strcmp(v, "discharge-negative") == 0)
                cli->read.sign = SIGN_DISCHARGE_NEGATIVE;
            else
                return pb_error_set(err, PB_EUSAGE, "--current-sign: expected auto, "
                                    "discharge-positive or discharge-negative, got '%s'", v);
            break;
        case OPT_ADC_SCALE:
            bad = cmd_parse_double("--adc-scale", v, -1e6, 1e6, &cli->read.adc_a_per_count, err);
            cli->read.have_adc = 1;
            break;
        case OPT_ADC_OFFSET:
            bad = cmd_parse_double("--adc-offset", v, -1e9, 1e9, &cli->read.adc_offset_counts, err);
            break;
        case OPT_ADC_BITS: bad = cmd_parse_int("--adc-bits", v, 1, 32, &cli->adc_bits, err); break;
        case OPT_ADC_VREF: bad = cmd_parse_double("--adc-vref", v, 1e-3, 100, &cli->adc_vref, err); break;
        case OPT_SENSE_RATIO: bad = cmd_parse_double("--sense-ratio", v, 1e-6, 1e9, &cli->sense_ratio, err); break;
        case OPT_SENSE_OHM: bad = cmd_parse_double("--sense-ohm", v, 1e-9, 1e9, &cli->sense_ohm, err); break;
        case OPT_GAP: bad = cmd_parse_double("--gap", v, 1e-6, 1e9, &cli->an.gap_s, err); break;
        case OPT_REST: bad = cmd_parse_double("--rest-current", v, 0.0, 1e4, &cli->an.rest_a, err); break;
        case OPT_FIT:
            if (strcmp(v, "robust") == 0)
                cli->an.plain_fit = 0;
            else if (strcmp(v, "ols") == 0)
                cli->an.plain_fit = 1;
            else
                return pb_error_set(err, PB_EUSAGE, "--fit: expected robust or ols, got '%s'", v);
            break;
        case OPT_JSON: cli->json = 1; break;
        case 'h':
            fputs(usage, stdout);
            *done = 1;
            return cmd_finish_stdout(err);
        case '?':
        default:
            if (optopt)
                return pb_error_set(err, PB_EUSAGE, "analyze: option needs a value or is unknown: "
                                    "'%s' (see 'packbook analyze --help')", argv[optind - 1]);
            return pb_error_set(err, PB_EUSAGE, "analyze: unknown option '%s' (see 'packbook "
                                "analyze --help')", argv[optind - 1]);
        }
        if (bad)
            return PB_EUSAGE;
    }
    int chain = cli->adc_bits || cli->adc_vref > 0 || cli->sense_ratio > 0 || cli->sense_ohm > 0;
    if (chain) {
        if (!cli->adc_bits || !(cli->adc_vref > 0) || !(cli->sense_ratio > 0) || !(cli->sense_ohm > 0))
            return pb_error_set(err, PB_EUSAGE, "the sense chain needs all of --adc-bits, "
                                "--adc-vref, --sense-ratio and --sense-ohm");
        if (cli->read.have_adc)
            return pb_error_set(err, PB_EUSAGE, "give --adc-scale or the sense chain, not both");
        cli->read.adc_a_per_count = logread_adc_a_per_count(cli->adc_bits, cli->adc_vref,
                                                            cli->sense_ratio, cli->sense_ohm);
        cli->read.have_adc = 1;
    }
    if (optind >= argc)
        return pb_error_set(err, PB_EUSAGE, "analyze: no log given (see 'packbook analyze --help')");
    if (optind + 1 < argc)
        return pb_error_set(err, PB_EUSAGE, "analyze: one log at a time, got '%s' and '%s'",
                            argv[optind], argv[optind + 1]);
    cli->path = argv[optind];
    return PB_OK;
}

enum pb_code cmd_analyze(int argc, char **argv, struct app *app, struct pb_error *err)
{
    struct analyze_cli cli = {0};
    struct logread_stats stats;
    struct series *s = NULL;
    struct analysis *a = NULL;
    FILE *fp = NULL;
    enum pb_code rc;
    (void)app;

    cli.an.chemistry = -1;
    int done = 0;
    rc = parse_args(argc, argv, &cli, &done, err);
    if (rc != PB_OK || done)
        return rc;
    int is_stdin = strcmp(cli.path, "-") == 0;
    fp = is_stdin ? stdin : fopen(cli.path, "rb");
    if (!fp)
        return pb_error_set(err, PB_EINPUT, "cannot open '%s': %m", cli.path);
    const char *name = is_stdin ? "(stdin)" : cli.path;
    s = logread_file(fp, name, &cli.read, &stats, err);
    if (!s) {
        rc = err->code;
        goto cleanup;
    }
    a = analysis_new();
    if (!a) {
        rc = pb_error_set(err, PB_ENOMEM, "out of memory");
        goto cleanup;
    }
    rc = analyze_series(s, &stats, name, &cli.an, a, err);
    if (rc != PB_OK)
        goto cleanup;
    struct report_input in = {name, &stats, &cli.an, cli.an.plain_fit};
    if ((cli.json ? report_analysis_json(stdout, a, &in) : report_analysis_text(stdout, a, &in)) != 0) {
        rc = pb_error_set(err, PB_EOUTPUT, "cannot write the output");
        goto cleanup;
    }
    rc = cmd_finish_stdout(err);
cleanup:
    if (fp && !is_stdin)
        fclose(fp);
    analysis_free(a);
    series_free(s);
    return rc;
}
