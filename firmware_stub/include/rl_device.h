/*
 * rl_device.h - the device side of the rigloop protocol (docs/protocol.md section 6).
 *
 * Usage on a board: fill an rl_hal, call rl_device_init once, then from the main loop feed every
 * received byte (rl_device_rx_byte) or datagram (rl_device_rx_frame) and call rl_device_poll as
 * often as possible. rl_device_poll runs the sample tick when it is due by hal.micros: command
 * watchdog, apply the newest command, read the sensors, send the SAMPLE. Call every rl_device_*
 * function from one context (the main loop); interrupts should only queue received bytes.
 *
 * No heap: an rl_device is one plain struct that the caller owns (static storage is usual).
 */
#ifndef RL_DEVICE_H
#define RL_DEVICE_H

#include "rl_auth.h"
#include "rl_cobs.h"
#include "rl_common.h"
#include "rl_hal.h"
#include "rl_proto.h"

/* The part of the configuration a CONFIGURE message sets. */
typedef struct rl_settings {
    uint32_t period_us;   /* sample period */
    uint32_t watchdog_us; /* command watchdog, >= period_us */
    float safe;           /* actuator value that leaves the rig harmless */
    float u_min;          /* clamp low */
    float u_max;          /* clamp high */
} rl_settings;

/* What the firmware knows about itself at build time. */
typedef struct rl_device_config {
    const char *name;       /* device name sent in HELLO, at most 16 ASCII characters */
    uint16_t fw_version;    /* free format, e.g. major * 256 + minor */
    uint8_t n_channels;     /* channels per SAMPLE, 0..32 */
    uint32_t min_period_us; /* fastest sample period the board can keep */
    uint32_t max_period_us; /* slowest sample period accepted */
    float actuator_min;     /* what the hardware can do: a CONFIGURE asking for a clamp range */
    float actuator_max;     /*   outside [actuator_min, actuator_max] is refused (FAULT 4) */
    rl_settings defaults;   /* in force from start-up until the first CONFIGURE */
} rl_device_config;

/* Counters for diagnostics; they only ever grow (and wrap). */
typedef struct rl_device_counters {
    uint32_t rejected[RL_REJECT_COUNT]; /* per rejection reason; index RL_REJECT_NONE unused */
    uint32_t frames_accepted;           /* frames that passed every check */
    uint32_t commands_accepted;         /* COMMANDs taken while armed */
    uint32_t commands_ignored;          /* valid COMMANDs that arrived while not armed */
    uint32_t arms_ignored;              /* ARMs that arrived before any CONFIGURE */
    uint32_t samples_sent;
    uint32_t ticks_missed;              /* ticks skipped because poll came too late */
    uint32_t watchdog_trips;
    uint32_t stops;
    uint32_t faults_sent;
    /* protocol 1.1 (section 6.7, section 14) */
    uint32_t foreign;                   /* frames from others while bound (rl_device_note_foreign) */
    uint32_t binds;                     /* accepted CONFIGUREs: each binds the device to its sender */
    uint32_t releases;                  /* bindings ended (disarmed and the host silent) */
} rl_device_counters;

/* Release time of a binding (docs/protocol.md section 6.7): disarmed and silent this long. */
#define RL_RELEASE_US 1000000u
/* Largest forward step of a COMMAND sequence number accepted (section 5). */
#define RL_SEQ_MAX_JUMP 0x10000u

/* Fills out[0..8) with a device nonce that never repeats (hardware RNG, or a boot counter kept
 * in non-volatile memory followed by a session counter). */
typedef void (*rl_nonce_fn)(void *ctx, uint8_t out[RL_NONCE_LEN]);

typedef enum rl_device_init_result {
    RL_DEVICE_OK = 0,
    RL_DEVICE_BAD_HAL,     /* a callback is missing or the transport is unknown */
    RL_DEVICE_BAD_CONFIG   /* n_channels > 32, period or actuator limits, or defaults that break
                              the CONFIGURE rules */
} rl_device_init_result;

typedef struct rl_device {
    rl_hal hal;
    rl_device_config config;
    char name[RL_NAME_LEN];
    rl_settings active;

    uint16_t flags;        /* latched status bits (everything except CLAMPED) */
    uint8_t clamped;       /* the applied value was clamped */
    float applied;         /* value in force at the actuator */
    uint32_t applied_cmd_seq;

    uint8_t have_pending;  /* a COMMAND accepted since ARM waits for (or is in) force */
    float pending_value;
    uint32_t pending_seq;

    uint8_t have_last_seq; /* sequence tracking; cleared at start-up and on CONFIGURE */
    uint32_t last_seq;

    uint64_t last_accept_us; /* watchdog reference: ARM or the last accepted COMMAND */
    uint64_t next_tick_us;
    uint32_t sample_seq;
    uint8_t last_stop_reason;

    /* protocol 1.1: binding and authentication (all zero = unkeyed, as before) */
    uint8_t bound;          /* a CONFIGURE bound the device to its sender */
    uint8_t hello_ext;      /* answer HELLO in the 1.1 form (the QUERY carried a nonce) */
    uint8_t keyed;          /* rl_device_set_key was called: every frame must carry a tag */
    uint64_t bound_rx_us;   /* last accepted frame while bound */
    rl_nonce_fn nonce_fn;
    void *nonce_ctx;
    rl_auth auth;
    uint8_t rx_plain[RL_MAX_FRAME];

    rl_cobs_stream rx;
    uint8_t tx_frame[RL_MAX_FRAME];
    uint8_t tx_wire[RL_COBS_MAX_ENCODED(RL_MAX_FRAME) + 1u];
    rl_device_counters counters;
} rl_device;

/*
 * Start the device: output safe (config->defaults.safe), not armed, not configured; send HELLO;
 * first tick one default period from now. The hal is copied; config->name is copied.
 */
RL_MUST_CHECK rl_device_init_result rl_device_init(rl_device *d, const rl_hal *hal,
                                                   const rl_device_config *config);

/* Stream transport: feed one received byte (frames are handled as their delimiter arrives). */
void rl_device_rx_byte(rl_device *d, uint8_t byte);

/* Stream transport: feed a run of received bytes. */
void rl_device_rx_bytes(rl_device *d, const uint8_t *data, size_t len);

/*
 * Datagram transport: handle one received frame (payload + CRC, no COBS). Returns
 * RL_REJECT_NONE if the frame was valid, else the reason it was rejected (already counted).
 * A valid frame tells a datagram port which peer address to answer. While rl_device_bound is
 * nonzero, pass on only frames from the host of the binding CONFIGURE (protocol 1.1, section 6.7).
 */
RL_MUST_CHECK rl_reject rl_device_rx_frame(rl_device *d, const uint8_t *frame, size_t len);

/*
 * Tell the device that received bytes were lost before reaching it (a full receive buffer).
 * A lost STOP cannot be ruled out, so this is a fault: output safe, disarmed, FAULT code 5; the
 * stream decoder resynchronises on the next 0x00.
 */
void rl_device_rx_overflow(rl_device *d);

/* Run the sample tick (watchdog, apply, sample, report) when due by hal.micros. Call as often
 * as possible: the tick runs late by as much as the calls are apart. */
void rl_device_poll(rl_device *d);

/* hal.micros time of the next tick: a port may sleep until then unless bytes arrive. */
uint64_t rl_device_next_deadline_us(const rl_device *d);

/*
 * Raise a device fault (code RL_FAULT_SENSOR, RL_FAULT_HARDWARE or a vendor code >= 0x8000;
 * value is the offending reading or NaN): output safe at once, disarm, set FAULT, send FAULT.
 * FAULT latches until the host sends ARM. While the condition lasts, call this again on every
 * poll: repeated calls while FAULT is latched do nothing, and a re-arm with the condition still
 * present is stopped again at once.
 */
void rl_device_raise_fault(rl_device *d, uint16_t code, float value);

/* Status bits as the next SAMPLE would report them. */
uint16_t rl_device_status(const rl_device *d);

/* Actuator value in force. */
float rl_device_applied(const rl_device *d);

/* Settings in force (the defaults until a CONFIGURE is accepted). */
const rl_settings *rl_device_settings(const rl_device *d);

/* Diagnostic counters. */
const rl_device_counters *rl_device_get_counters(const rl_device *d);

/*
 * Protocol 1.1, section 14: require authenticated frames under this pre-shared key (16..64 bytes)
 * from now on. nonce_fn gives a fresh device nonce for each session. Call after rl_device_init,
 * before the first frame arrives. Returns 0, or -1 for a bad key length or a missing nonce_fn.
 * A port that never calls it keeps the unauthenticated behaviour.
 */
RL_MUST_CHECK int rl_device_set_key(rl_device *d, const uint8_t *key, size_t key_len,
                                    rl_nonce_fn nonce_fn, void *nonce_ctx);

/*
 * Protocol 1.1, section 6.7: nonzero while a host holds the device (from a valid CONFIGURE until
 * the device is disarmed and that host has sent nothing for RL_RELEASE_US). A datagram port
 * passes on, while bound, only frames from the address the binding CONFIGURE came from (see
 * counters.binds to learn when that address changes) and reports the rest with
 * rl_device_note_foreign. A stream port (one peer) need not call it.
 */
int rl_device_bound(rl_device *d);

/* Count a frame from someone other than the bound host; it is not acted on. */
void rl_device_note_foreign(rl_device *d);

#endif /* RL_DEVICE_H */
