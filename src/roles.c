/* Which capture channel plays which role: explicit names, design, then safe guesses. */
#include <tankfit/roles.h>

#include <ctype.h>
#include <stdio.h>
#include <string.h>

static void lower(char *dst, const char *src, size_t size)
{
    size_t i = 0;
    for (; src[i] && i + 1 < size; i++)
        dst[i] = (char)tolower((unsigned char)src[i]);
    dst[i] = '\0';
}

static int name_in(const char *name, const char *const *list)
{
    char l[TF_NAME_SIZE];
    lower(l, name, sizeof l);
    for (int i = 0; list[i]; i++)
        if (strcmp(l, list[i]) == 0)
            return 1;
    return 0;
}

static void append(char *buf, size_t size, const char *fmt, const char *a, const char *b)
{
    size_t l = strlen(buf);
    if (l + 1 >= size)
        return;
    snprintf(buf + l, size - l, fmt, l ? ", " : "", a, b);
}

/* Comma-separated list of the capture's channels (with units) for messages. */
static void channel_list(const tf_capture *cap, char *have, size_t size)
{
    have[0] = '\0';
    for (size_t k = 0; k < cap->nchan; k++)
        append(have, size, cap->ch[k].unit[0] ? "%s%s (%s)" : "%s%s%s", cap->ch[k].name,
               cap->ch[k].unit);
    if (!have[0])
        snprintf(have, size, "none");
}

static tf_status lookup(const tf_capture *cap, const char *name, const char *role, int *slot,
                        tf_error *err)
{
    if (!name || !name[0])
        return TF_OK;
    int c = tf_capture_find(cap, name);
    if (c < 0) {
        char have[512];
        channel_list(cap, have, sizeof have);
        return tf_error_set(err, TF_ERR_USAGE, "%s channel '%s' is not in %s (channels: %s)",
                            role, name, cap->path[0] ? cap->path : "the capture", have);
    }
    *slot = c;
    return TF_OK;
}

static int used(const tf_roles *r, int c)
{
    if (r->current == c || r->voltage == c || r->cap_voltage == c || r->switch_voltage == c)
        return 1;
    for (int g = 0; g < 4; g++)
        if (r->gate[g] == c)
            return 1;
    return 0;
}

/* A guess by name must not contradict a unit the file states: a column called
 * "i" in volts is a voltage probe's output, not a current. */
static int unit_fits(const char *unit, const char *want)
{
    return !unit[0] || strcmp(unit, want) == 0;
}

/* Guess a role from names only: exactly one candidate channel, not yet used by
 * another role, whose unit (if any) is the role's. */
static void guess(const tf_capture *cap, tf_roles *r, int *slot, const char *role,
                  const char *unit, const char *const *names)
{
    if (*slot >= 0)
        return;
    int found = -1, count = 0;
    for (size_t c = 0; c < cap->nchan; c++)
        if (!used(r, (int)c) && name_in(cap->ch[c].name, names) &&
            unit_fits(cap->ch[c].unit, unit)) {
            found = (int)c;
            count++;
        }
    if (count != 1)
        return;
    *slot = found;
    append(r->guessed, sizeof r->guessed, "%s%s = '%s'", role, cap->ch[found].name);
}

static tf_status no_current(const tf_capture *cap, const tf_roles *r, tf_error *err)
{
    char amps[256] = "", have[512];
    int count = 0;
    for (size_t c = 0; c < cap->nchan; c++)
        if (!used(r, (int)c) && strcmp(cap->ch[c].unit, "A") == 0) {
            append(amps, sizeof amps, "%s'%s'%s", cap->ch[c].name, "");
            count++;
        }
    if (count > 1)
        return tf_error_set(err, TF_ERR_USAGE,
                            "no load-current channel: %d channels are in A (%s), which one is "
                            "the load current is not clear: give --current NAME or [channels] "
                            "current in the design file",
                            count, amps);
    channel_list(cap, have, sizeof have);
    return tf_error_set(err, TF_ERR_USAGE,
                        "no load-current channel among %s: give --current NAME or [channels] "
                        "current in the design file",
                        have);
}

tf_status tf_roles_resolve(const tf_capture *cap, const tf_role_names *names,
                           const tf_design *design, tf_roles *r, tf_error *err)
{
    static const char *const cur[] = {"i_load", "i", "iload", "current", "i_tank", "il", NULL};
    static const char *const vout[] = {"v_out", "vout", "u_out", "output_voltage", "v_o", NULL};
    static const char *const vcap[] = {"v_c", "vc", "v_cap", "vcap", "capacitor_voltage", NULL};
    static const char *const vsw[] = {"v_ak1", "vak1", "v_ak", "vak", "switch_voltage", NULL};
    static const char *const gnames[4][4] = {{"g1", "gate1", NULL}, {"g2", "gate2", NULL},
                                             {"g3", "gate3", NULL}, {"g4", "gate4", NULL}};
    tf_status st;
    memset(r, 0, sizeof *r);
    r->current = r->voltage = r->cap_voltage = r->switch_voltage = -1;
    for (int g = 0; g < 4; g++)
        r->gate[g] = -1;

    if (names) {
        if ((st = lookup(cap, names->current, "current", &r->current, err)) ||
            (st = lookup(cap, names->voltage, "output voltage", &r->voltage, err)) ||
            (st = lookup(cap, names->cap_voltage, "capacitor voltage", &r->cap_voltage, err)) ||
            (st = lookup(cap, names->switch_voltage, "switch voltage", &r->switch_voltage, err)))
            return st;
        for (int g = 0; g < 4; g++)
            if ((st = lookup(cap, names->gate[g], "gate", &r->gate[g], err)))
                return st;
    }
    if (design) {
        if ((r->current < 0 &&
             (st = lookup(cap, design->ch_current, "[channels] current", &r->current, err))) ||
            (r->voltage < 0 && (st = lookup(cap, design->ch_output_voltage,
                                            "[channels] output_voltage", &r->voltage, err))) ||
            (r->cap_voltage < 0 && (st = lookup(cap, design->ch_capacitor_voltage,
                                                "[channels] capacitor_voltage", &r->cap_voltage,
                                                err))) ||
            (r->switch_voltage < 0 && (st = lookup(cap, design->ch_switch_voltage,
                                                   "[channels] switch_voltage",
                                                   &r->switch_voltage, err))))
            return st;
        for (int g = 0; g < 4; g++)
            if (r->gate[g] < 0 &&
                (st = lookup(cap, design->ch_gate[g], "[channels] gate", &r->gate[g], err)))
                return st;
    }
    guess(cap, r, &r->current, "current", "A", cur);
    guess(cap, r, &r->voltage, "output voltage", "V", vout);
    guess(cap, r, &r->cap_voltage, "capacitor voltage", "V", vcap);
    guess(cap, r, &r->switch_voltage, "switch voltage", "V", vsw);
    for (int g = 0; g < 4; g++)
        guess(cap, r, &r->gate[g], "gate", "V", gnames[g]);
    if (r->current < 0) {
        /* the only free channel in amperes is unambiguous too */
        int found = -1, count = 0;
        for (size_t c = 0; c < cap->nchan; c++)
            if (!used(r, (int)c) && strcmp(cap->ch[c].unit, "A") == 0) {
                found = (int)c;
                count++;
            }
        if (count == 1) {
            r->current = found;
            append(r->guessed, sizeof r->guessed, "%scurrent = '%s'%s", cap->ch[found].name,
                   " (only channel in A)");
        }
    }
    if (r->current < 0)
        return no_current(cap, r, err);
    return TF_OK;
}
