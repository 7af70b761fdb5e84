/*
 * rl_proto.h - rigloop wire protocol version 1, revision 1.1 (docs/protocol.md): message structs, frame
 * encode/decode, rejection reasons and sequence-number arithmetic.
 *
 * A frame is: version (u8), type (u8), body, CRC-16/CCITT-FALSE of the preceding bytes (u16).
 * All fields little-endian, floats IEEE-754 binary32. This module does no I/O and keeps no
 * state; rl_device.h adds the state (sequence tracking, counters).
 */
#ifndef RL_PROTO_H
#define RL_PROTO_H

#include "rl_common.h"

#define RL_PROTO_VERSION 1u
#define RL_MAX_PAYLOAD 254u  /* version + type + body */
#define RL_MAX_FRAME 256u    /* payload + CRC */
#define RL_MAX_CHANNELS 32u
#define RL_NAME_LEN 16u
#define RL_FRAME_OVERHEAD 4u /* version, type, CRC */

/* Message types: 0x01-0x0F device -> host, 0x10-0x1F host -> device. */
typedef enum rl_msg_type {
    RL_MSG_HELLO = 0x01,
    RL_MSG_SAMPLE = 0x02,
    RL_MSG_FAULT = 0x03,
    RL_MSG_QUERY = 0x10,
    RL_MSG_ARM = 0x11,
    RL_MSG_CONFIGURE = 0x12,
    RL_MSG_COMMAND = 0x13,
    RL_MSG_STOP = 0x14
} rl_msg_type;

/* Body lengths in bytes (SAMPLE: RL_SAMPLE_BODY_BASE + 4 * n). */
#define RL_HELLO_BODY 42u
#define RL_SAMPLE_BODY_BASE 23u
#define RL_FAULT_BODY 16u
#define RL_QUERY_BODY 0u
#define RL_ARM_BODY 0u
#define RL_CONFIGURE_BODY 20u
#define RL_COMMAND_BODY 12u
#define RL_STOP_BODY 1u
/* Protocol 1.1: the forms with a session nonce (QUERY) and the extension (HELLO). */
#define RL_QUERY_NONCE_BODY 8u
#define RL_HELLO_EXT_BODY 59u
#define RL_NONCE_LEN 8u
/* HELLO auth field (1.1). */
#define RL_AUTH_MODE_NONE 0u
#define RL_AUTH_MODE_HMAC_SHA256_64 1u

/* Status bits carried by SAMPLE (u16), FAULT (u16) and HELLO (low byte). */
#define RL_STATUS_ARMED 0x0001u
#define RL_STATUS_STOP_LATCHED 0x0002u
#define RL_STATUS_WATCHDOG 0x0004u
#define RL_STATUS_CLAMPED 0x0008u
#define RL_STATUS_FAULT 0x0010u
#define RL_STATUS_CONFIGURED 0x0020u
#define RL_STATUS_RX_ERROR 0x0040u
#define RL_STATUS_OVERRUN 0x0080u

/* FAULT codes (0x8000-0xFFFF are free for board-specific faults). */
#define RL_FAULT_WATCHDOG 1u
#define RL_FAULT_SENSOR 2u
#define RL_FAULT_HARDWARE 3u
#define RL_FAULT_CONFIGURE_REJECTED 4u
#define RL_FAULT_RX_OVERFLOW 5u
#define RL_FAULT_VENDOR_FIRST 0x8000u

/* STOP reasons. */
#define RL_STOP_OPERATOR 0u
#define RL_STOP_EMERGENCY 1u
#define RL_STOP_HOST_TRIP 2u
#define RL_STOP_HOST_SHUTDOWN 3u

/*
 * Why a receiver rejected a frame, in the order the checks run (docs/protocol.md section 3):
 * the first failing check names the reason.
 */
typedef enum rl_reject {
    RL_REJECT_NONE = 0, /* accepted */
    RL_REJECT_COBS,
    RL_REJECT_SHORT,
    RL_REJECT_CRC,
    RL_REJECT_VERSION,
    RL_REJECT_TYPE,
    RL_REJECT_LENGTH,
    RL_REJECT_VALUE,
    RL_REJECT_SEQUENCE,
    RL_REJECT_AUTH, /* 1.1: no tag, wrong tag or replayed frame on a keyed link, or a tagged frame
                       on an unkeyed one. Checked after type and before length (section 3); last
                       in this enum only so that the older values keep their numbers. */
    RL_REJECT_COUNT /* number of entries, not a reason */
} rl_reject;

/* The reason's name as the protocol document spells it ("crc", "length", ...; "none"). */
const char *rl_reject_name(rl_reject reason);

typedef struct rl_hello {
    uint8_t proto_min;
    uint8_t proto_max;
    uint16_t fw_version;
    uint8_t n_channels;
    uint8_t status; /* low byte of the status bits */
    uint32_t period_us;
    uint32_t watchdog_us;
    float safe;
    float u_min;
    float u_max;
    char name[RL_NAME_LEN]; /* ASCII, NUL-padded, not necessarily NUL-terminated */
    /* Protocol 1.1 extension, on the wire only when ext is nonzero (the answer to a QUERY that
     * carried a nonce). Set ext = 0 for the 42-byte 1.0 form. */
    uint8_t ext;
    uint32_t min_period_us;
    uint32_t max_period_us;
    uint8_t auth; /* RL_AUTH_MODE_* */
    uint8_t nonce[RL_NONCE_LEN];
} rl_hello;

/* QUERY: a 1.1 host sends its session nonce (has_nonce = 1); a 1.0 host sends no body. */
typedef struct rl_query {
    uint8_t has_nonce;
    uint8_t nonce[RL_NONCE_LEN];
} rl_query;

typedef struct rl_sample {
    uint32_t seq;
    uint64_t t_us;
    uint16_t status;
    float applied;
    uint32_t last_cmd_seq;
    uint8_t n;
    float channels[RL_MAX_CHANNELS];
} rl_sample;

typedef struct rl_fault {
    uint64_t t_us;
    uint16_t code;
    uint16_t status;
    float value; /* the offending value, NaN if none */
} rl_fault;

typedef struct rl_configure {
    uint32_t period_us;
    uint32_t watchdog_us;
    float safe;
    float u_min;
    float u_max;
} rl_configure;

typedef struct rl_command {
    uint32_t seq;
    uint32_t answers;
    float value;
} rl_command;

typedef struct rl_stop {
    uint8_t reason;
} rl_stop;

/* One decoded message; type selects the member of body (QUERY and ARM have no body). */
typedef struct rl_msg {
    uint8_t type;
    union {
        rl_hello hello;
        rl_query query;
        rl_sample sample;
        rl_fault fault;
        rl_configure configure;
        rl_command command;
        rl_stop stop;
    } body;
} rl_msg;

/*
 * Encode m as a frame (payload + CRC) into frame[0..cap). Returns the frame length, or 0 if the
 * type is unknown, a SAMPLE has more than RL_MAX_CHANNELS channels, or cap is too small.
 */
RL_MUST_CHECK size_t rl_proto_encode(const rl_msg *m, uint8_t *frame, size_t cap);

/*
 * Decode one frame (payload + CRC, no COBS). Runs the structural checks in protocol order:
 * short, crc, version, type, length. Returns RL_REJECT_NONE and fills *out on success.
 * Value rules and then sequence rules (which need receiver state) come after these, in that
 * order, and are separate: see rl_proto_check_values and rl_seq_newer.
 */
RL_MUST_CHECK rl_reject rl_proto_decode(const uint8_t *frame, size_t len, rl_msg *out);

/*
 * The `value` rules: a COMMAND or CONFIGURE must carry finite floats, and a CONFIGURE must have
 * u_min <= safe <= u_max, period_us > 0 and watchdog_us >= period_us. Device-specific limits
 * on period_us are checked by the device. Other message types always pass.
 */
RL_MUST_CHECK rl_reject rl_proto_check_values(const rl_msg *m);

/*
 * Serial-number arithmetic on u32 sequence numbers: nonzero when a is newer than b, i.e.
 * (a - b) mod 2^32 lies in [1, 2^31).
 */
static inline int rl_seq_newer(uint32_t a, uint32_t b)
{
    const uint32_t d = a - b;
    return d != 0u && d < 0x80000000u;
}

/* Body length a type requires (SAMPLE: for n channels); -1 for an unknown type. The 1.0 lengths:
 * a 1.1 QUERY may also carry RL_QUERY_NONCE_BODY bytes and a HELLO RL_HELLO_EXT_BODY. */
long rl_proto_body_length(uint8_t type, uint8_t n_channels);

#endif /* RL_PROTO_H */
