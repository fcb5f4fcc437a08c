/* SI-prefixed numbers for reports (prefixes: BIPM SI Brochure, 9th edition). */
#include <tankfit/siformat.h>

#include <math.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

static int takes_prefix(const char *unit)
{
    static const char *const plain[] = {"%", "FS", "dB", "deg", NULL};
    if (!unit || !unit[0])
        return 0;
    for (int k = 0; plain[k]; k++)
        if (strcmp(unit, plain[k]) == 0)
            return 0;
    return 1;
}

char *tf_si_format(char *buf, size_t size, double value, const char *unit, int digits)
{
    /* index 8 is no prefix; each step is a factor 1000 */
    static const char *const prefix[] = {"y", "z", "a", "f", "p", "n", "u", "m", "",
                                         "k", "M", "G", "T", "P", "E", "Z", "Y"};
    const char *u = unit ? unit : "";
    const char *sep = u[0] ? " " : "";
    if (!buf || size == 0)
        return buf;
    if (digits < 1)
        digits = 1;
    if (digits > 17)
        digits = 17;
    if (isnan(value)) {
        snprintf(buf, size, "n/a");
        return buf;
    }
    if (isinf(value)) {
        snprintf(buf, size, "%sinf%s%s", value < 0 ? "-" : "", sep, u);
        return buf;
    }
    if (!takes_prefix(u)) {
        snprintf(buf, size, "%.*g%s%s", digits, value, sep, u);
        return buf;
    }
    if (value == 0) {
        snprintf(buf, size, "%.*f%s%s", digits - 1, 0.0, sep, u);
        return buf;
    }
    /* round to the digits first so that 999.96 with 4 digits becomes 1.000 k */
    char tmp[64];
    snprintf(tmp, sizeof tmp, "%.*e", digits - 1, value);
    double rounded = strtod(tmp, NULL);
    /* the decimal exponent printf chose after rounding */
    const char *ep = strchr(tmp, 'e');
    int e10 = ep ? (int)strtol(ep + 1, NULL, 10) : 0;
    int e3 = e10 >= 0 ? e10 / 3 : -((-e10 + 2) / 3);
    if (e3 < -8 || e3 > 8) {
        snprintf(buf, size, "%.*e%s%s", digits - 1, value, sep, u);
        return buf;
    }
    double mant = rounded / pow(10.0, 3 * e3);
    int int_digits = e10 - 3 * e3 + 1; /* 1..3 digits before the point */
    int decimals = digits - int_digits;
    if (decimals < 0)
        decimals = 0;
    snprintf(buf, size, "%.*f %s%s", decimals, mant, prefix[e3 + 8], u);
    return buf;
}
