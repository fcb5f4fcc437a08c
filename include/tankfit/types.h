/* Small enumerations shared by several pipeline stages: topology, mode, device. */
#ifndef TANKFIT_TYPES_H
#define TANKFIT_TYPES_H

#ifdef __cplusplus
extern "C" {
#endif

/* Inverter topology of the stage being measured or simulated. */
typedef enum {
    TF_TOPO_UNKNOWN = 0,
    TF_TOPO_SINGLE,      /* one T1/D1 pair fired once per period, reset choke */
    TF_TOPO_HALF_BRIDGE, /* T1/D1 upper, T2/D2 lower */
    TF_TOPO_FULL_BRIDGE, /* diagonal pairs T1+T2, T3+T4 with their diodes */
    TF_TOPO_RING_DOWN    /* pre-charged capacitor released once, free ringing */
} tf_topology;

/* Operating mode of a firing sequence (or a design's allowed mode). */
typedef enum {
    TF_MODE_UNKNOWN = 0,
    TF_MODE_ANY,             /* only as a design limit: any mode is acceptable */
    TF_MODE_NON_OVERLAPPING, /* dead zone between bursts */
    TF_MODE_OVERLAPPING,     /* next thyristor fired during the diode interval */
    TF_MODE_CONTINUOUS       /* diode interval ends as the next firing happens */
} tf_mode;

/* Conducting device (or diagonal pair) a current lobe is attributed to. */
typedef enum {
    TF_DEV_UNKNOWN = 0,
    TF_DEV_T1, TF_DEV_D1, TF_DEV_T2, TF_DEV_D2,
    TF_DEV_T1T2, TF_DEV_D1D2, TF_DEV_T3T4, TF_DEV_D3D4,
    TF_DEV_RING /* a lobe of a free ring-down oscillation */
} tf_device;

/* Names as written in design files, JSON and reports ("half-bridge",
 * "non-overlapping", "T1+T2", ...). Never NULL. */
const char *tf_topology_name(tf_topology t);
const char *tf_mode_name(tf_mode m);
const char *tf_device_name(tf_device d);

/* Parse the names above (exact, case-sensitive). Return the UNKNOWN value for
 * anything else. */
tf_topology tf_topology_parse(const char *s);
tf_mode tf_mode_parse(const char *s);

/* Non-zero when the device is a thyristor (or thyristor pair). */
int tf_device_is_thyristor(tf_device d);

#ifdef __cplusplus
}
#endif
#endif
