/*
 * rl_host_plant.h - a first-order plant for the host port, so a host-side controller can close a
 * real loop through the firmware stub without hardware:
 *
 *     tau * y' = -y + gain * u
 *
 * (a fan or motor speed answering its drive with one time constant). Integrated exactly for a
 * zero-order-held input, so the result does not depend on how often it is evaluated.
 */
#ifndef RL_HOST_PLANT_H
#define RL_HOST_PLANT_H

#include <stdint.h>

typedef struct rl_host_plant {
    double y;      /* output */
    double u;      /* input held since t_us */
    double gain;   /* steady-state output per unit input */
    double tau_s;  /* time constant, seconds (> 0) */
    uint64_t t_us; /* time of the state */
} rl_host_plant;

void rl_host_plant_init(rl_host_plant *p, double gain, double tau_s, double y0, uint64_t t_us);

/*
 * Advance the state to t_us with the held input:
 *     y(t) = y_ss + (y(t0) - y_ss) * exp(-(t - t0) / tau),  y_ss = gain * u.
 */
void rl_host_plant_advance(rl_host_plant *p, uint64_t t_us);

/* Advance to t_us with the old input, then hold u from t_us on. */
void rl_host_plant_set_input(rl_host_plant *p, uint64_t t_us, double u);

#endif /* RL_HOST_PLANT_H */
