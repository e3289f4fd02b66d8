#include <getopt.h>
#include <stdio.h>
#include <string.h>

#include "../report/report.h"
#include "cmd.h"

static const char usage[] =
    "usage: packbook chemistry [--json]\n"
    "\n"
    "Prints the open-circuit-voltage tables (SoC against rested cell voltage),\n"
    "cut-off voltages and full/empty thresholds used for each chemistry, with their\n"
    "sources.\n";

enum pb_code cmd_chemistry(int argc, char **argv, struct app *app, struct pb_error *err)
{
    static const struct option longopts[] = {
        {"json", no_argument, NULL, 'j'}, {"help", no_argument, NULL, 'h'}, {NULL, 0, NULL, 0}};
    int json = 0, c;
    (void)app;
    optind = 1;
    while ((c = getopt_long(argc, argv, "h", longopts, NULL)) != -1) {
        switch (c) {
        case 'j':
            json = 1;
            break;
        case 'h':
            fputs(usage, stdout);
            return cmd_finish_stdout(err);
        default:
            return pb_error_set(err, PB_EUSAGE, "chemistry: see 'packbook chemistry --help'");
        }
    }
    if (optind < argc)
        return pb_error_set(err, PB_EUSAGE, "chemistry: unexpected argument '%s'", argv[optind]);
    if ((json ? report_chemistry_json(stdout) : report_chemistry_text(stdout)) != 0)
        return pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    return cmd_finish_stdout(err);
}
