/* analyze: resonance section. PLACEHOLDER until the fitter lands. */
#include "analyze_parts.h"

void tf_cli_print_resonance(FILE *out, const tf_capture *cap, const tf_fit_result *fit)
{
    (void)cap;
    (void)fit;
    fputs("Resonance: not available in this build\n", out);
}
