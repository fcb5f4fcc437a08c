/* Numbers with SI prefixes and units ("2.2 uF", "20us", "6 kHz", "5 %"), locale-free. */
#include <tankfit/import.h>

#include <ctype.h>
#include <math.h>
#include <stdlib.h>
#include <string.h>

#include "numparse.h"
#include "quantity.h"

/* Units the tool knows, with the canonical spelling and the name used in messages.
 * A suffix that is exactly one of these has no prefix (so "F" is farads, not femto). */
static const struct {
    const char *spelling, *canonical, *long_name;
} units[] = {
    {"F", "F", "farads (F)"},
    {"H", "H", "henries (H)"},
    {"s", "s", "seconds (s)"},
    {"Hz", "Hz", "hertz (Hz)"},
    {"V", "V", "volts (V)"},
    {"A", "A", "amperes (A)"},
    {"W", "W", "watts (W)"},
    {"VA", "VA", "volt-amperes (VA)"},
    {"ohm", "ohm", "ohms (ohm)"},
    {"Ohm", "ohm", "ohms (ohm)"},
    {"\xce\xa9", "ohm", "ohms (ohm)"},     /* U+03A9 Greek capital omega */
    {"\xe2\x84\xa6", "ohm", "ohms (ohm)"}, /* U+2126 ohm sign */
    {"S/s", "S/s", "samples per second (S/s)"},
    {"Sa/s", "S/s", "samples per second (S/s)"},
    {"A/V", "A/V", "amperes per volt (A/V)"},
    {"V/V", "V/V", "volts per volt (V/V)"},
    {"V/A", "V/A", "volts per ampere (V/A)"},
    {"J", "J", "joules (J)"},
    {"C", "C", "coulombs (C)"},
    {"%", "%", "percent (%)"},
    {"FS", "FS", "full scale (FS)"},
};
#define NUNITS (sizeof units / sizeof units[0])

static int unit_index(const char *u)
{
    for (size_t i = 0; i < NUNITS; i++)
        if (strcmp(u, units[i].spelling) == 0)
            return (int)i;
    return -1;
}

const char *tf_unit_long_name(const char *unit)
{
    if (!unit || !unit[0])
        return "a plain number";
    int i = unit_index(unit);
    return i >= 0 ? units[i].long_name : unit;
}

/* Prefix at the start of s: its power of ten and byte length, or 0 when none
 * (SI Brochure, 9th ed., table 7: the powers of 1000, which tf_si_format prints;
 * micro as u, the micro sign or Greek mu). */
static int prefix_of(const char *s, int *exponent)
{
    static const struct { const char *p; int e; } prefixes[] = {
        {"\xc2\xb5", -6}, {"\xce\xbc", -6},
        {"y", -24}, {"z", -21}, {"a", -18}, {"f", -15}, {"p", -12}, {"n", -9},
        {"u", -6}, {"m", -3}, {"k", 3}, {"M", 6}, {"G", 9}, {"T", 12}, {"P", 15},
        {"E", 18}, {"Z", 21}, {"Y", 24}, {NULL, 0}};
    for (int i = 0; prefixes[i].p; i++) {
        size_t l = strlen(prefixes[i].p);
        if (strncmp(s, prefixes[i].p, l) == 0) {
            *exponent = prefixes[i].e;
            return (int)l;
        }
    }
    return 0;
}

/* Length of a decimal number at s (sign, digits, fraction, exponent), 0 if none;
 * *mantissa is the length without the exponent. Checked here so that hex floats,
 * "inf" and "nan" are never accepted. */
static size_t number_span(const char *s, size_t *mantissa)
{
    size_t i = 0, digits = 0;
    if (s[i] == '+' || s[i] == '-')
        i++;
    while (isdigit((unsigned char)s[i]))
        i++, digits++;
    if (s[i] == '.') {
        i++;
        while (isdigit((unsigned char)s[i]))
            i++, digits++;
    }
    if (digits == 0)
        return 0;
    *mantissa = i;
    if (s[i] == 'e' || s[i] == 'E') {
        size_t j = i + 1;
        if (s[j] == '+' || s[j] == '-')
            j++;
        if (isdigit((unsigned char)s[j])) {
            while (isdigit((unsigned char)s[j]))
                j++;
            i = j;
        }
    }
    return i;
}

/* The number at s (n bytes, mantissa m of them) times 10^shift, correctly rounded:
 * the prefix is applied to the decimal exponent, not by a multiplication, so
 * "2.2 uF" gives exactly the double nearest to 2.2e-6. */
static int scaled_value(const char *s, size_t n, size_t m, int shift, double *v)
{
    long e = 0;
    if (n > m) {
        const char *p = s + m + 1;
        int neg = *p == '-';
        if (*p == '+' || *p == '-')
            p++;
        for (; p < s + n; p++)
            if (e < 100000)
                e = e * 10 + (*p - '0');
        if (neg)
            e = -e;
    }
    e += shift;
    char buf[160];
    if (m > 120)
        return -1;
    memcpy(buf, s, m);
    int k = snprintf(buf + m, sizeof buf - m, "e%ld", e);
    const char *end;
    if (k <= 0 || tf_parse_double(buf, m + (size_t)k, '.', v, &end) != 0 || end != buf + m + (size_t)k)
        return -1;
    return 0;
}

tf_qty_status tf_quantity_parse(const char *text, tf_quantity *q)
{
    memset(q, 0, sizeof *q);
    const char *p = text;
    while (*p && isspace((unsigned char)*p))
        p++;
    if (!*p)
        return TF_QTY_EMPTY;
    size_t m = 0, n = number_span(p, &m);
    /* "0x10" would read as 0 followed by a unit: call it what it is, not a number */
    int hex = n > 0 && p[n - 1] == '0' && (p[n] == 'x' || p[n] == 'X') && n == m;
    if (n == 0 || n > 120 || hex) {
        size_t l = strlen(p);
        if (l >= sizeof q->suffix)
            l = sizeof q->suffix - 1;
        memcpy(q->suffix, p, l);
        return TF_QTY_NUMBER;
    }
    const char *num = p;
    p += n;
    while (*p && isspace((unsigned char)*p))
        p++;
    size_t len = strlen(p);
    while (len > 0 && isspace((unsigned char)p[len - 1]))
        len--;
    if (len >= sizeof q->suffix) {
        memcpy(q->suffix, p, sizeof q->suffix - 1);
        return TF_QTY_UNIT;
    }
    memcpy(q->suffix, p, len);
    q->suffix[len] = '\0';

    int shift = 0, ui = -1;
    if (len > 0) {
        ui = unit_index(q->suffix);
        if (ui < 0) {
            int pl = prefix_of(q->suffix, &shift);
            if (pl == 0)
                return TF_QTY_UNIT;
            const char *u = q->suffix + pl;
            if (u[0]) {
                ui = unit_index(u);
                /* percent and full scale are ratios: a prefix on them is a typo */
                if (ui < 0 || strcmp(units[ui].canonical, "%") == 0 ||
                    strcmp(units[ui].canonical, "FS") == 0)
                    return TF_QTY_UNIT;
            } else {
                q->prefix_only = 1;
            }
        }
    }
    if (ui >= 0) {
        strcpy(q->unit, units[ui].canonical);
        if (strcmp(q->unit, "%") == 0)
            shift = -2;
    }
    if (scaled_value(num, n, m, shift, &q->value) != 0)
        return TF_QTY_NUMBER;
    if (!isfinite(q->value))
        return TF_QTY_RANGE;
    return TF_QTY_OK;
}

int tf_parse_quantity(const char *text, double *value, char *unit, size_t unit_size)
{
    tf_quantity q;
    if (tf_quantity_parse(text, &q) != TF_QTY_OK)
        return -1;
    if (unit && unit_size) {
        strncpy(unit, q.unit, unit_size - 1);
        unit[unit_size - 1] = '\0';
    }
    *value = q.value;
    return 0;
}
