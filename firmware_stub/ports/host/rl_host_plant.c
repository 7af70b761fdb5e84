/*
 * rl_host_plant.c - see rl_host_plant.h.
 */
#include "rl_host_plant.h"

#include <math.h>

void rl_host_plant_init(rl_host_plant *p, double gain, double tau_s, double y0, uint64_t t_us)
{
    p->y = y0;
    p->u = 0.0;
    p->gain = gain;
    p->tau_s = tau_s;
    p->t_us = t_us;
}

void rl_host_plant_advance(rl_host_plant *p, uint64_t t_us)
{
    double dt_s;
    double y_ss;
    if (t_us <= p->t_us) {
        return;
    }
    dt_s = (double)(t_us - p->t_us) * 1e-6;
    y_ss = p->gain * p->u;
    p->y = y_ss + (p->y - y_ss) * exp(-dt_s / p->tau_s);
    p->t_us = t_us;
}

void rl_host_plant_set_input(rl_host_plant *p, uint64_t t_us, double u)
{
    rl_host_plant_advance(p, t_us);
    p->u = u;
}
