#include <getopt.h>
#include <stdio.h>
#include <string.h>

#include "../report/report.h"
#include "cmd.h"
#include "opt.h"

static const char usage[] =
    "usage: packbook chemistry [--json]\n"
    "\n"
    "Prints the open-circuit-voltage tables (SoC against rested cell voltage),\n"
    "cut-off voltages and full/empty thresholds used for each chemistry, with their\n"
    "sources.\n"
    "\n";

enum pb_code cmd_chemistry(int argc, char **argv, struct app *app, struct pb_error *err)
{
    static const struct opt table[] = {
        {.name = "json", .kind = OPT_FLAG, .off = 0, .set = 1, .help = "JSON on standard output"},
        {0},
    };
    int json = 0, done = 0;
    (void)app;
    struct opt_cmd cmd = {"chemistry", usage, NULL, {{NULL, table, &json, NULL}}, 1, NULL, NULL};
    enum pb_code parsed = opt_parse(&cmd, argc, argv, &done, err);
    if (parsed != PB_OK || done)
        return parsed;
    if (optind < argc)
        return pb_error_set(err, PB_EUSAGE, "chemistry: unexpected argument '%s'", argv[optind]);
    if ((json ? report_chemistry_json(stdout) : report_chemistry_text(stdout)) != 0)
        return pb_error_set(err, PB_EOUTPUT, "cannot write the output");
    return cmd_finish_stdout(err);
}
