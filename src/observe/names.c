/* The names rows, cells and the live line give a phase and a class, the teardown included:
 * below every observer, so that they and the list all read them from here. */
#include <stdio.h>

#include "obs_int.h"

const char *obs_phase_name(const plan_t *p, size_t phase)
{
    return phase < p->n_phases ? p->phases[phase].name : "teardown";
}

const char *obs_class_name(const plan_t *p, int cls)
{
    return cls >= 0 && (size_t)cls < p->n_reqs ? p->reqs[cls].name : "teardown";
}

const char *obs_whole_name(const char *cls, char *buf, size_t cap)
{
    snprintf(buf, cap, "%s/all-pages", cls);
    return buf;
}
