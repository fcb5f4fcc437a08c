/* Channel roles: which capture channel is the load current, output voltage, ... */
#ifndef TANKFIT_ROLES_H
#define TANKFIT_ROLES_H

#include <tankfit/capture.h>
#include <tankfit/design.h>

#ifdef __cplusplus
extern "C" {
#endif

/* Channel indices into a capture, -1 when the role is absent. */
typedef struct tf_roles {
    int current;
    int voltage;         /* bridge output voltage across the tank */
    int cap_voltage;     /* resonant capacitor voltage */
    int switch_voltage;  /* T1 anode-cathode */
    int gate[4];
    char guessed[512];   /* human-readable note of roles that were guessed ("" if none) */
} tf_roles;

/* Names requested for each role (NULL or "" = not requested). */
typedef struct tf_role_names {
    const char *current, *voltage, *cap_voltage, *switch_voltage, *gate[4];
} tf_role_names;

/* Resolve roles: explicit names first, then the design's [channels] (design may
 * be NULL), then guesses from unambiguous names and units (noted in
 * roles->guessed). A requested name that is not in the capture is TF_ERR_USAGE
 * naming the channels that exist. No current channel is TF_ERR_USAGE. */
tf_status tf_roles_resolve(const tf_capture *cap, const tf_role_names *names,
                           const tf_design *design, tf_roles *roles, tf_error *err);

#ifdef __cplusplus
}
#endif
#endif
