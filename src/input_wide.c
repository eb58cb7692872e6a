/* Wide survey exports: one column per answer option (issue 7). */
#include "input_internal.h"

pm_err_t pm_i_read_wide(FILE *fp, const pm_input_opts_t *o, pm_table_t *t, pm_i_csv_opts *co,
                        pm_diag_t *diag) {
    (void)fp;
    (void)o;
    (void)co;
    return pm_diag_set(diag, PM_EUSAGE, t->source, 0, "--format wide is not available yet");
}
