/* Names of topologies, modes and devices as written in files and reports. */
#include <tankfit/types.h>

#include <string.h>

static const char *const topo_names[] = {"unknown", "single", "half-bridge", "full-bridge",
                                         "ring-down"};
static const char *const mode_names[] = {"unknown", "any", "non-overlapping", "overlapping",
                                         "continuous"};
static const char *const dev_names[] = {"?", "T1", "D1", "T2", "D2", "T1+T2",
                                        "D1+D2", "T3+T4", "D3+D4", "ring"};

#define COUNT(a) (sizeof(a) / sizeof((a)[0]))

const char *tf_topology_name(tf_topology t)
{
    return (unsigned)t < COUNT(topo_names) ? topo_names[t] : "unknown";
}

const char *tf_mode_name(tf_mode m)
{
    return (unsigned)m < COUNT(mode_names) ? mode_names[m] : "unknown";
}

const char *tf_device_name(tf_device d)
{
    return (unsigned)d < COUNT(dev_names) ? dev_names[d] : "?";
}

tf_topology tf_topology_parse(const char *s)
{
    for (unsigned i = 1; s && i < COUNT(topo_names); i++)
        if (strcmp(s, topo_names[i]) == 0)
            return (tf_topology)i;
    return TF_TOPO_UNKNOWN;
}

tf_mode tf_mode_parse(const char *s)
{
    for (unsigned i = 1; s && i < COUNT(mode_names); i++)
        if (strcmp(s, mode_names[i]) == 0)
            return (tf_mode)i;
    return TF_MODE_UNKNOWN;
}

int tf_device_is_thyristor(tf_device d)
{
    return d == TF_DEV_T1 || d == TF_DEV_T2 || d == TF_DEV_T1T2 || d == TF_DEV_T3T4;
}
