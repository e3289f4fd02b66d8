/* report_predict: text and JSON for a prediction. Owns nothing. */
#ifndef PB_REPORT_PREDICT_H
#define PB_REPORT_PREDICT_H

#include <stdio.h>

#include "../core/predict.h"

/* The conservative figure leads; warn[0..nwarn) are shown last. Return 0
 * or -1 when writing failed. */
int report_predict_text(FILE *out, const struct predict_inputs *in, const struct predict_load *l,
                        double load_sd, const struct predict_opts *o, const struct predict_run *r,
                        const struct predict_mc *mc, const char *const *warn, int nwarn);
int report_predict_json(FILE *out, const struct predict_inputs *in, const struct predict_load *l,
                        double load_sd, const struct predict_opts *o, const struct predict_run *r,
                        const struct predict_mc *mc, const char *const *warn, int nwarn);

#endif
