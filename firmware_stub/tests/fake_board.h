/*
 * fake_board.h - a board for the unit tests: a clock the test sets by hand, an actuator and
 * sensors that are plain variables, and a transport that captures every packet the device sends.
 */
#ifndef FAKE_BOARD_H
#define FAKE_BOARD_H

#include "rl_device.h"

#define FAKE_MAX_PACKETS 512u
#define FAKE_PACKET_CAP 300u

typedef struct fake_board {
    uint64_t now;
    float actuator;
    unsigned actuator_writes;
    float channels[RL_MAX_CHANNELS];
    int sensor_rc;
    rl_transport transport;
    uint8_t packets[FAKE_MAX_PACKETS][FAKE_PACKET_CAP];
    size_t packet_len[FAKE_MAX_PACKETS];
    size_t head; /* next packet to read */
    size_t tail; /* next free slot */
    unsigned lost_packets;
    rl_auth *opener; /* when set, fake_pop opens tagged frames with it (a keyed host) */
} fake_board;

void fake_board_init(fake_board *b, rl_transport transport, uint64_t start_us);
rl_hal fake_board_hal(fake_board *b);

/* The test device: 3 channels, periods 100 us .. 1 s, actuator range [-1000, 1000], defaults
 * 1 kHz / 5 ms watchdog / safe 0 / clamp [0, 100]. */
rl_device_config fake_device_config(void);

/*
 * Pop the next packet the device sent and decode it (checking its framing: delimiter and COBS on
 * a stream). Returns 1 and fills *out, or 0 if no packet is waiting.
 */
int fake_pop(fake_board *b, rl_msg *out);

/* Pop packets until one of the given type; returns 1 if found (others are discarded). */
int fake_pop_type(fake_board *b, uint8_t type, rl_msg *out);

/* Number of packets waiting. */
size_t fake_pending(const fake_board *b);

/* Drop every waiting packet. */
void fake_drain(fake_board *b);

/* Encode m and deliver it to the device over the board's transport. */
rl_reject fake_send(rl_device *d, const fake_board *b, const rl_msg *m);

/*
 * Advance the fake clock to t, polling the device at every deadline on the way (ticks and
 * watchdog), as a main loop with no latency would.
 */
void fake_run_until(rl_device *d, fake_board *b, uint64_t t);

/* Drop waiting packets, run to the next tick and return its SAMPLE (the test fails if none
 * comes). */
rl_sample fake_tick(rl_device *d, fake_board *b);

/* Message builders. */
rl_msg msg_configure(uint32_t period_us, uint32_t watchdog_us, float safe, float u_min,
                     float u_max);
rl_msg msg_command(uint32_t seq, uint32_t answers, float value);
rl_msg msg_simple(uint8_t type);
rl_msg msg_stop(uint8_t reason);

#endif /* FAKE_BOARD_H */
