/* analyze: harmonics and power section. PLACEHOLDER until the spectrum module lands. */
#include "analyze_parts.h"

void tf_cli_print_spectrum(FILE *out, const tf_capture *cap, const tf_spectrum_result *spec,
                           int nshow)
{
    (void)cap;
    (void)spec;
    (void)nshow;
    fputs("Harmonics: not available in this build\n", out);
}
