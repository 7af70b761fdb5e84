/*
 * test_auth.c - SHA-256 and HMAC-SHA-256 against published values, the authenticated-frame
 * vectors of docs/protocol-vectors.json, a keyed device (docs/protocol.md section 14) and the
 * binding of a device to its host (section 6.7). Fault injection on a keyed link is in
 * test_fault_injection.c.
 */
#include <string.h>

#include "fake_board.h"
#include "rl_auth.h"
#include "rl_sha256.h"
#include "rl_test.h"
#include "rl_vectors.h"

static int hex_equal(const uint8_t *got, size_t len, const char *hex)
{
    size_t i;
    for (i = 0; i < len; ++i) {
        unsigned v = 0;
        int k;
        for (k = 0; k < 2; ++k) {
            const char c = hex[2u * i + (size_t)k];
            v = v * 16u + (unsigned)(c <= '9' ? c - '0' : c - 'a' + 10);
        }
        if (got[i] != (uint8_t)v) {
            return 0;
        }
    }
    return hex[2u * len] == '\0';
}

static void sha256_published_examples(void)
{
    /* FIPS 180-4 examples (NIST "Cryptographic Standards and Guidelines: Examples with
     * Intermediate Values", SHA256.pdf): one-block "abc" and the two-block 448-bit message.
     * The empty message: value recalled from memory, confirmed by Python's hashlib. */
    static const char two_block[] = "abcdbcdecdefdefgefghfghighijhijkijkljklmklmnlmnomnopnopq";
    uint8_t d[RL_SHA256_DIGEST];
    rl_sha256 s;
    rl_sha256_init(&s);
    rl_sha256_update(&s, (const uint8_t *)"abc", 3);
    rl_sha256_final(&s, d);
    CHECK(hex_equal(d, 32, "ba7816bf8f01cfea414140de5dae2223b00361a396177a9cb410ff61f20015ad"));
    rl_sha256_init(&s);
    rl_sha256_update(&s, (const uint8_t *)two_block, strlen(two_block));
    rl_sha256_final(&s, d);
    CHECK(hex_equal(d, 32, "248d6a61d20638b8e5c026930c3e6039a33ce45964ff2167f6ecedd419db06c1"));
    rl_sha256_init(&s);
    rl_sha256_final(&s, d);
    CHECK(hex_equal(d, 32, "e3b0c44298fc1c149afbf4c8996fb92427ae41e4649b934ca495991b7852b855"));
}

static void hmac_sha256_rfc4231(void)
{
    /* RFC 4231 section 4, test cases 1-7 (HMAC-SHA-256 lines). The values were recalled from
     * memory and confirmed against Python's hmac/hashlib, a reference implementation; test case
     * 1 also against a published copy of the RFC's table. Case 5 is checked truncated to 128
     * bits, as the RFC gives it. */
    static const char tc7[] = "This is a test using a larger than block-size key and a larger than "
                              "block-size data. The key needs to be hashed before being used by the "
                              "HMAC algorithm.";
    static const char tc6[] = "Test Using Larger Than Block-Size Key - Hash Key First";
    uint8_t key[131], data[64], mac[32];
    size_t i;

    memset(key, 0x0b, 20);
    rl_hmac_sha256(key, 20, (const uint8_t *)"Hi There", 8, mac, 32);
    CHECK(hex_equal(mac, 32, "b0344c61d8db38535ca8afceaf0bf12b881dc200c9833da726e9376c2e32cff7"));

    rl_hmac_sha256((const uint8_t *)"Jefe", 4, (const uint8_t *)"what do ya want for nothing?", 28,
                   mac, 32);
    CHECK(hex_equal(mac, 32, "5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843"));

    memset(key, 0xaa, 20);
    memset(data, 0xdd, 50);
    rl_hmac_sha256(key, 20, data, 50, mac, 32);
    CHECK(hex_equal(mac, 32, "773ea91e36800e46854db8ebd09181a72959098b3ef8c122d9635514ced565fe"));

    for (i = 0; i < 25u; ++i) {
        key[i] = (uint8_t)(i + 1u);
    }
    memset(data, 0xcd, 50);
    rl_hmac_sha256(key, 25, data, 50, mac, 32);
    CHECK(hex_equal(mac, 32, "82558a389a443c0ea4cc819899f2083a85f0faa3e578f8077a2e3ff46729665b"));

    memset(key, 0x0c, 20);
    rl_hmac_sha256(key, 20, (const uint8_t *)"Test With Truncation", 20, mac, 16);
    CHECK(hex_equal(mac, 16, "a3b6167473100ee06e0c796c2955552b"));

    memset(key, 0xaa, 131);
    rl_hmac_sha256(key, 131, (const uint8_t *)tc6, strlen(tc6), mac, 32);
    CHECK(hex_equal(mac, 32, "60e431591ee0b67f0d8a26aacbf5b77f8e0bc6213728c5140546040f0ee37f54"));
    rl_hmac_sha256(key, 131, (const uint8_t *)tc7, strlen(tc7), mac, 32);
    CHECK(hex_equal(mac, 32, "9b09ffa71b942fcb27635fbcd5b0e944bfdc63644f0713938a7f51535c3a35e2"));
}

static void vector_session(rl_auth *a)
{
    CHECK(rl_auth_set_key(a, rlv_auth_key, RLV_AUTH_KEY_LEN) == 0);
    rl_auth_start(a, rlv_auth_host_nonce, rlv_auth_device_nonce);
}

static void auth_vectors_open_and_seal(void)
{
    size_t i, good = 0, bad = 0;
    CHECK(RLV_AUTH_COUNT > 0u);
    for (i = 0; i < RLV_AUTH_COUNT; ++i) {
        const rlv_auth_case *c = &rlv_auth_cases[i];
        static rl_auth a;
        uint8_t plain[RL_MAX_FRAME], again[RL_MAX_FRAME];
        size_t plain_len = 0, again_len;
        rl_msg m;
        rl_reject r;
        vector_session(&a);
        a.rx_counter = c->bad ? 2u : c->counter - 1u;
        r = rl_auth_open(&a, c->frame, c->len, plain, sizeof plain, &plain_len);
        if (c->bad) {
            ++bad;
            CHECK_MSG(r == RL_REJECT_AUTH, c->name);
            continue;
        }
        ++good;
        CHECK_MSG(r == RL_REJECT_NONE, c->name);
        CHECK_MSG(rl_proto_decode(plain, plain_len, &m) == RL_REJECT_NONE, c->name);
        /* the same frame again is a replay */
        CHECK_MSG(rl_auth_open(&a, c->frame, c->len, again, sizeof again, &again_len) == RL_REJECT_AUTH,
                  c->name);
        /* sealing the plain frame with the same counter gives the vector's bytes */
        memcpy(again, plain, plain_len);
        a.tx_counter = c->counter - 1u;
        again_len = rl_auth_seal(&a, again, plain_len, sizeof again);
        CHECK_EQ_U(again_len, c->len);
        CHECK_MSG(memcmp(again, c->frame, c->len) == 0, c->name);
    }
    CHECK(good >= 5u && bad >= 3u);
}

/* ---- a keyed device -------------------------------------------------------------------------- */

static fake_board board;
static rl_device dev;
static uint32_t nonce_counter;

static void counting_nonce(void *ctx, uint8_t out[RL_NONCE_LEN])
{
    size_t i;
    (void)ctx;
    ++nonce_counter; /* a boot counter would be kept in flash on a board; here it only grows */
    for (i = 0; i < RL_NONCE_LEN; ++i) {
        out[i] = (uint8_t)(nonce_counter >> (8u * (i % 4u)));
    }
}

static const uint8_t KEY[32] = {1, 2, 3, 4, 5, 6, 7, 8, 9, 10, 11, 12, 13, 14, 15, 16,
                                17, 18, 19, 20, 21, 22, 23, 24, 25, 26, 27, 28, 29, 30, 31, 32};
static const uint8_t OTHER_KEY[32] = {9};

static void start_keyed(void)
{
    const rl_device_config cfg = fake_device_config();
    rl_hal hal;
    fake_board_init(&board, RL_TRANSPORT_DATAGRAM, 1000000u);
    hal = fake_board_hal(&board);
    CHECK(rl_device_init(&dev, &hal, &cfg) == RL_DEVICE_OK);
    CHECK(rl_device_set_key(&dev, KEY, sizeof KEY, counting_nonce, 0) == 0);
    fake_drain(&board);
}

/* Host side: encode m, seal it under host (if it has a session), deliver as a datagram. */
static rl_reject host_send(rl_auth *host, const rl_msg *m)
{
    uint8_t frame[RL_MAX_FRAME];
    size_t n = rl_proto_encode(m, frame, sizeof frame);
    if (host->have_session) {
        n = rl_auth_seal(host, frame, n, sizeof frame);
    }
    return rl_device_rx_frame(&dev, frame, n);
}

/* QUERY with a nonce; the host learns the device nonce from the tagged HELLO it gets back. */
static int host_connect(rl_auth *host, const uint8_t *key, uint8_t first_nonce_byte)
{
    rl_msg q;
    uint8_t plain[RL_MAX_FRAME];
    size_t plain_len = 0, i;
    memset(&q, 0, sizeof q);
    q.type = RL_MSG_QUERY;
    q.body.query.has_nonce = 1;
    for (i = 0; i < RL_NONCE_LEN; ++i) {
        q.body.query.nonce[i] = (uint8_t)(first_nonce_byte + i);
    }
    memset(host, 0, sizeof *host);
    CHECK(rl_auth_set_key(host, key, 32) == 0);
    fake_drain(&board);
    if (host_send(host, &q) != RL_REJECT_NONE || fake_pending(&board) == 0u) {
        return 0;
    }
    {
        const uint8_t *f = board.packets[board.head % FAKE_MAX_PACKETS];
        const size_t n = board.packet_len[board.head % FAKE_MAX_PACKETS];
        CHECK_EQ_U(f[1], RL_MSG_HELLO | RL_AUTH_FLAG); /* nothing leaves a keyed device untagged */
        CHECK_EQ_U(n, RL_FRAME_OVERHEAD + RL_HELLO_EXT_BODY + RL_AUTH_TRAILER);
        rl_auth_start(host, q.body.query.nonce, f + 2 + 51); /* the device nonce in the HELLO */
        fake_drain(&board);
        return rl_auth_open(host, f, n, plain, sizeof plain, &plain_len) == RL_REJECT_NONE;
    }
}

static void keyed_device_runs_a_session(void)
{
    static rl_auth host;
    rl_msg m;
    start_keyed();
    CHECK(host_connect(&host, KEY, 0x10));
    m = msg_configure(1000, 3000, 0.0f, 0.0f, 100.0f);
    CHECK(host_send(&host, &m) == RL_REJECT_NONE);
    m = msg_simple(RL_MSG_ARM);
    CHECK(host_send(&host, &m) == RL_REJECT_NONE);
    m = msg_command(1, 0, 42.0f);
    CHECK(host_send(&host, &m) == RL_REJECT_NONE);
    fake_run_until(&dev, &board, board.now + 1000u);
    CHECK_EQ_F(rl_device_applied(&dev), 42.0f);
    CHECK(rl_device_bound(&dev));
}

static void keyed_device_refuses_unkeyed_and_wrongly_keyed_hosts(void)
{
    static rl_auth host;
    rl_msg m;
    start_keyed();
    memset(&host, 0, sizeof host); /* no key: plain frames */
    m = msg_configure(1000, 3000, 0.0f, 0.0f, 100.0f);
    CHECK(host_send(&host, &m) == RL_REJECT_AUTH);
    m = msg_simple(RL_MSG_ARM);
    CHECK(host_send(&host, &m) == RL_REJECT_AUTH);
    m = msg_command(1, 0, 100.0f);
    CHECK(host_send(&host, &m) == RL_REJECT_AUTH);
    m = msg_simple(RL_MSG_QUERY); /* a 1.0 QUERY: no nonce, no session */
    CHECK(host_send(&host, &m) == RL_REJECT_AUTH);
    CHECK(!host_connect(&host, OTHER_KEY, 0x20)); /* the HELLO does not open with another key */
    m = msg_configure(1000, 3000, 0.0f, 0.0f, 100.0f);
    CHECK(host_send(&host, &m) == RL_REJECT_AUTH);
    CHECK_EQ_U(rl_device_status(&dev) & (RL_STATUS_CONFIGURED | RL_STATUS_ARMED), 0u);
    CHECK_EQ_U(rl_device_get_counters(&dev)->rejected[RL_REJECT_AUTH], 5u);
}

static void replayed_frames_of_an_earlier_session_are_rejected(void)
{
    static rl_auth host;
    static uint8_t captured[8][RL_MAX_FRAME];
    static size_t captured_len[8];
    size_t n_captured = 0, i;
    rl_msg msgs[4];
    start_keyed();
    CHECK(host_connect(&host, KEY, 0x30));
    msgs[0] = msg_configure(1000, 3000, 0.0f, 0.0f, 100.0f);
    msgs[1] = msg_simple(RL_MSG_ARM);
    msgs[2] = msg_command(1, 0, 80.0f);
    msgs[3] = msg_stop(0);
    for (i = 0; i < 4u; ++i) {
        size_t n = rl_proto_encode(&msgs[i], captured[n_captured], RL_MAX_FRAME);
        n = rl_auth_seal(&host, captured[n_captured], n, RL_MAX_FRAME);
        captured_len[n_captured] = n;
        CHECK(rl_device_rx_frame(&dev, captured[n_captured], n) == RL_REJECT_NONE);
        ++n_captured;
    }
    /* within the session: the ARM again is a replay */
    CHECK(rl_device_rx_frame(&dev, captured[1], captured_len[1]) == RL_REJECT_AUTH);
    /* the host leaves; after the release time a new session has new nonces */
    fake_run_until(&dev, &board, board.now + RL_RELEASE_US + 2000u);
    CHECK(!rl_device_bound(&dev));
    CHECK(host_connect(&host, KEY, 0x40));
    for (i = 0; i < n_captured; ++i) {
        CHECK(rl_device_rx_frame(&dev, captured[i], captured_len[i]) == RL_REJECT_AUTH);
    }
    CHECK_EQ_U(rl_device_status(&dev) & RL_STATUS_ARMED, 0u);
    CHECK_EQ_F(rl_device_applied(&dev), 0.0f);
}

static void binding_holds_until_disarmed_and_silent(void)
{
    const rl_device_config cfg = fake_device_config();
    rl_hal hal;
    rl_msg m;
    fake_board_init(&board, RL_TRANSPORT_DATAGRAM, 1000000u);
    hal = fake_board_hal(&board);
    CHECK(rl_device_init(&dev, &hal, &cfg) == RL_DEVICE_OK);
    CHECK(!rl_device_bound(&dev));
    m = msg_configure(1000, 3000, 0.0f, 0.0f, 100.0f);
    (void)fake_send(&dev, &board, &m);
    CHECK(rl_device_bound(&dev));
    CHECK_EQ_U(rl_device_get_counters(&dev)->binds, 1u);
    m = msg_simple(RL_MSG_ARM);
    (void)fake_send(&dev, &board, &m);
    m = msg_stop(0);
    board.now += 500000u;
    (void)fake_send(&dev, &board, &m); /* the host's last frame */
    board.now += RL_RELEASE_US;
    CHECK(rl_device_bound(&dev)); /* exactly the release time: still held */
    board.now += 1u;
    CHECK(!rl_device_bound(&dev));
    CHECK_EQ_U(rl_device_get_counters(&dev)->releases, 1u);
    rl_device_note_foreign(&dev);
    CHECK_EQ_U(rl_device_get_counters(&dev)->foreign, 1u);
}

/* A new host asking for a session while the device is bound must not keep the binding alive
 * (over serial every frame reaches the device): only frames the device acts on count. */
static void refused_queries_do_not_extend_the_binding(void)
{
    static rl_auth host, intruder;
    rl_msg m;
    start_keyed();
    CHECK(host_connect(&host, KEY, 0x50));
    m = msg_configure(1000, 3000, 0.0f, 0.0f, 100.0f);
    CHECK(host_send(&host, &m) == RL_REJECT_NONE);
    m = msg_stop(0);
    CHECK(host_send(&host, &m) == RL_REJECT_NONE);
    board.now += RL_RELEASE_US / 2u;
    CHECK(!host_connect(&intruder, KEY, 0x60)); /* refused: bound */
    board.now += RL_RELEASE_US / 2u + 1u;
    CHECK(!rl_device_bound(&dev)); /* released on time all the same */
    CHECK(host_connect(&intruder, KEY, 0x60));
}

void run_auth_tests(void)
{
    RUN(sha256_published_examples);
    RUN(hmac_sha256_rfc4231);
    RUN(auth_vectors_open_and_seal);
    RUN(keyed_device_runs_a_session);
    RUN(keyed_device_refuses_unkeyed_and_wrongly_keyed_hosts);
    RUN(replayed_frames_of_an_earlier_session_are_rejected);
    RUN(binding_holds_until_disarmed_and_silent);
    RUN(refused_queries_do_not_extend_the_binding);
}
