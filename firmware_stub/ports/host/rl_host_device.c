/*
 * rl_host_device.c - the firmware stub as a POSIX process, driving a simulated first-order
 * plant, so the host software can be tested end to end against the real device code.
 *
 *   rl_host_device --pty  [options]      serial over a pseudo-terminal; prints "PTY /dev/pts/N"
 *   rl_host_device --udp HOST:PORT [...] one frame per datagram; prints "UDP HOST:PORT"
 *   --key-file PATH                      authenticated frames (docs/protocol.md section 14)
 *
 * Over UDP the port binds to the host of the first valid CONFIGURE (section 6.7): until the core
 * releases it, datagrams from any other address are counted and dropped, and answers go only to
 * that host.
 *
 * The line on stdout is flushed at once, so a test can start the process and read where to
 * connect. Diagnostics go to stderr. SIGTERM or SIGINT ends the process cleanly (exit 0), as does
 * --quit-after. The loop sleeps in pselect() until the next tick or watchdog deadline, or until
 * bytes arrive.
 */
#define _XOPEN_SOURCE 700

#include <errno.h>
#include <fcntl.h>
#include <netdb.h>
#include <netinet/in.h>
#include <signal.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/select.h>
#include <sys/socket.h>
#include <termios.h>
#include <time.h>
#include <unistd.h>

#include "rl_device.h"
#include "rl_host_key.h"
#include "rl_host_plant.h"

#define HOST_FW_VERSION 0x0100u /* 1.0 */

typedef struct options {
    int use_pty;
    const char *udp_spec;
    unsigned channels;
    unsigned long period_us;
    unsigned long watchdog_us;
    unsigned long min_period_us;
    double safe, u_min, u_max;
    double gain, tau_s, y0;
    double quit_after_s;
    const char *name;
    const char *key_file;
} options;

typedef struct host_port {
    struct timespec start;
    rl_host_plant plant;
    int fd;      /* pty master or UDP socket */
    int pty_slave;
    int is_udp;
    struct sockaddr_storage peer;
    socklen_t peer_len;
    int have_peer;
    const struct sockaddr_storage *replying_to; /* sender of the datagram being handled */
    socklen_t replying_len;
    struct sockaddr_storage bound; /* the host of the binding CONFIGURE (section 6.7) */
    socklen_t bound_len;
    uint32_t binds_seen;
    int resync_next; /* a frame was cut short: start the next one with a delimiter */
    unsigned long bytes_dropped;
    unsigned long send_errors;
} host_port;

static volatile sig_atomic_t stop_requested = 0;

static void on_signal(int sig)
{
    (void)sig;
    stop_requested = 1;
}

/* ---- hal callbacks ------------------------------------------------------------------------ */

static uint64_t host_micros(void *ctx)
{
    const host_port *h = (const host_port *)ctx;
    struct timespec now;
    int64_t sec, nsec;
    clock_gettime(CLOCK_MONOTONIC, &now);
    sec = (int64_t)now.tv_sec - (int64_t)h->start.tv_sec;
    nsec = (int64_t)now.tv_nsec - (int64_t)h->start.tv_nsec;
    return (uint64_t)(sec * 1000000 + nsec / 1000);
}

static int host_read_channels(void *ctx, float *out, size_t n)
{
    host_port *h = (host_port *)ctx;
    const uint64_t t = host_micros(ctx);
    const double ramp_s = (double)t * 1e-6;
    size_t i;
    rl_host_plant_advance(&h->plant, t);
    for (i = 0; i < n; ++i) {
        if (i == 0) {
            out[i] = (float)h->plant.y;
        } else if (i == 1) {
            out[i] = (float)h->plant.u;
        } else {
            out[i] = (float)(ramp_s * (double)(i - 1));
        }
    }
    return 0;
}

static void host_write_actuator(void *ctx, float value)
{
    host_port *h = (host_port *)ctx;
    rl_host_plant_set_input(&h->plant, host_micros(ctx), (double)value);
}

static void host_write_bytes(void *ctx, const uint8_t *data, size_t len)
{
    host_port *h = (host_port *)ctx;
    if (h->is_udp) {
        /* An answer produced while handling a datagram (HELLO for QUERY, FAULT for a refused
         * CONFIGURE) goes to that datagram's sender; everything else to the last valid sender. */
        const struct sockaddr_storage *to = h->replying_to != NULL ? h->replying_to : &h->peer;
        const socklen_t to_len = h->replying_to != NULL ? h->replying_len : h->peer_len;
        if ((h->replying_to != NULL || h->have_peer) &&
            sendto(h->fd, data, len, 0, (const struct sockaddr *)to, to_len) < 0) {
            h->send_errors++; /* host gone or not listening: the device keeps sampling */
        }
        return;
    }
    if (h->resync_next) {
        static const uint8_t delimiter = 0x00;
        if (write(h->fd, &delimiter, 1) != 1) {
            h->bytes_dropped += len;
            return;
        }
        h->resync_next = 0;
    }
    {
        size_t done = 0;
        while (done < len) {
            const ssize_t w = write(h->fd, data + done, len - done);
            if (w <= 0) {
                /* Nobody reading and the pty buffer full: drop the rest, like a UART would. */
                h->bytes_dropped += (unsigned long)(len - done);
                h->resync_next = done > 0;
                return;
            }
            done += (size_t)w;
        }
    }
}

/* ---- options ------------------------------------------------------------------------------ */

static void usage(FILE *to)
{
    fprintf(to,
            "usage: rl_host_device (--pty | --udp HOST:PORT) [options]\n"
            "  --pty                 serve a pseudo-terminal (COBS-framed stream)\n"
            "  --udp HOST:PORT       serve UDP on HOST:PORT (port 0 picks a free port)\n"
            "  --channels N          channels per SAMPLE, 1..32 (default 3: y, u, ramp)\n"
            "  --period-us N         default sample period in microseconds (default 10000)\n"
            "  --watchdog-us N       default command watchdog (default 100000)\n"
            "  --min-period-us N     fastest period a CONFIGURE may ask for (default 100)\n"
            "  --safe X --u-min X --u-max X   default safe value and clamps (0, 0, 100)\n"
            "  --plant first-order   the simulated plant (the only one offered)\n"
            "  --gain X              plant steady-state gain (default 1)\n"
            "  --tau S               plant time constant in seconds (default 0.2)\n"
            "  --y0 X                plant initial output (default 0)\n"
            "  --name NAME           device name in HELLO, up to 16 characters (default host-stub)\n"
            "  --quit-after S        exit after S seconds (default 0: run until SIGTERM/SIGINT)\n"
            "  --key-file PATH       pre-shared key in hex (16..64 bytes), a file only its owner\n"
            "                        can read: every frame must carry a valid tag\n");
}

static int bad_option(const char *flag, const char *value, const char *fix)
{
    fprintf(stderr, "rl_host_device: %s %s: %s\n", flag, value ? value : "(missing)", fix);
    return 0;
}

static int parse_ulong(const char *flag, const char *text, unsigned long lo, unsigned long hi,
                       unsigned long *out)
{
    char *end = NULL;
    unsigned long v;
    char fix[128];
    if (text == NULL || text[0] == '\0' || text[0] == '-') {
        snprintf(fix, sizeof fix, "give a whole number from %lu to %lu", lo, hi);
        return bad_option(flag, text, fix);
    }
    errno = 0;
    v = strtoul(text, &end, 10);
    if (errno != 0 || *end != '\0' || v < lo || v > hi) {
        snprintf(fix, sizeof fix, "give a whole number from %lu to %lu", lo, hi);
        return bad_option(flag, text, fix);
    }
    *out = v;
    return 1;
}

static int parse_double(const char *flag, const char *text, double *out)
{
    char *end = NULL;
    double v;
    if (text == NULL || text[0] == '\0') {
        return bad_option(flag, text, "give a finite number such as 0.5");
    }
    errno = 0;
    v = strtod(text, &end);
    if (errno != 0 || *end != '\0' || !(v == v) || v > 3.0e38 || v < -3.0e38) {
        return bad_option(flag, text, "give a finite number such as 0.5");
    }
    *out = v;
    return 1;
}

static int parse_options(int argc, char **argv, options *o)
{
    int i;
    o->use_pty = 0;
    o->udp_spec = NULL;
    o->channels = 3;
    o->period_us = 10000;
    o->watchdog_us = 100000;
    o->min_period_us = 100;
    o->safe = 0.0;
    o->u_min = 0.0;
    o->u_max = 100.0;
    o->gain = 1.0;
    o->tau_s = 0.2;
    o->y0 = 0.0;
    o->quit_after_s = 0.0;
    o->name = "host-stub";
    o->key_file = NULL;

    for (i = 1; i < argc; ++i) {
        const char *a = argv[i];
        const char *v = (i + 1 < argc) ? argv[i + 1] : NULL;
        unsigned long tmp = 0;
        if (strcmp(a, "--help") == 0 || strcmp(a, "-h") == 0) {
            usage(stdout);
            exit(0);
        } else if (strcmp(a, "--pty") == 0) {
            o->use_pty = 1;
            continue;
        } else if (strcmp(a, "--udp") == 0) {
            const char *port = v != NULL ? strrchr(v, ':') : NULL;
            char *end = NULL;
            if (port == NULL || port == v || port[1] == '\0') {
                return bad_option(a, v, "give HOST:PORT, e.g. 127.0.0.1:0");
            }
            ++port;
            if (*port < '0' || *port > '9' || strtoul(port, &end, 10) > 65535UL || *end != '\0') {
                return bad_option(a, v, "give a port number from 0 to 65535 (0 picks a free one)");
            }
            o->udp_spec = v;
        } else if (strcmp(a, "--channels") == 0) {
            if (!parse_ulong(a, v, 1, RL_MAX_CHANNELS, &tmp)) {
                return 0;
            }
            o->channels = (unsigned)tmp;
        } else if (strcmp(a, "--period-us") == 0) {
            if (!parse_ulong(a, v, 1, 4000000000UL, &o->period_us)) {
                return 0;
            }
        } else if (strcmp(a, "--watchdog-us") == 0) {
            if (!parse_ulong(a, v, 1, 4000000000UL, &o->watchdog_us)) {
                return 0;
            }
        } else if (strcmp(a, "--min-period-us") == 0) {
            if (!parse_ulong(a, v, 1, 4000000000UL, &o->min_period_us)) {
                return 0;
            }
        } else if (strcmp(a, "--safe") == 0) {
            if (!parse_double(a, v, &o->safe)) {
                return 0;
            }
        } else if (strcmp(a, "--u-min") == 0) {
            if (!parse_double(a, v, &o->u_min)) {
                return 0;
            }
        } else if (strcmp(a, "--u-max") == 0) {
            if (!parse_double(a, v, &o->u_max)) {
                return 0;
            }
        } else if (strcmp(a, "--plant") == 0) {
            if (v == NULL || strcmp(v, "first-order") != 0) {
                return bad_option(a, v, "the only plant offered is first-order");
            }
        } else if (strcmp(a, "--gain") == 0) {
            if (!parse_double(a, v, &o->gain)) {
                return 0;
            }
        } else if (strcmp(a, "--tau") == 0) {
            if (!parse_double(a, v, &o->tau_s)) {
                return 0;
            }
            if (!(o->tau_s > 0.0)) {
                return bad_option(a, v, "the time constant must be greater than 0 seconds");
            }
        } else if (strcmp(a, "--y0") == 0) {
            if (!parse_double(a, v, &o->y0)) {
                return 0;
            }
        } else if (strcmp(a, "--quit-after") == 0) {
            if (!parse_double(a, v, &o->quit_after_s)) {
                return 0;
            }
            if (o->quit_after_s < 0.0) {
                return bad_option(a, v, "give 0 (no limit) or a positive number of seconds");
            }
        } else if (strcmp(a, "--key-file") == 0) {
            if (v == NULL || v[0] == '\0') {
                return bad_option(a, v, "give the path of the rig's key file");
            }
            o->key_file = v;
        } else if (strcmp(a, "--name") == 0) {
            if (v == NULL || strlen(v) > RL_NAME_LEN) {
                return bad_option(a, v, "give a name of 1 to 16 characters");
            }
            o->name = v;
        } else {
            fprintf(stderr, "rl_host_device: unknown option %s; see --help\n", a);
            return 0;
        }
        ++i; /* every option except --pty takes a value */
    }
    if (o->use_pty == (o->udp_spec != NULL)) {
        fprintf(stderr, "rl_host_device: choose exactly one transport: --pty or --udp HOST:PORT\n");
        return 0;
    }
    if (!(o->u_min <= o->safe && o->safe <= o->u_max)) {
        fprintf(stderr,
                "rl_host_device: --safe %g is outside [--u-min %g, --u-max %g]; choose a safe "
                "value inside the clamp range\n",
                o->safe, o->u_min, o->u_max);
        return 0;
    }
    if (o->watchdog_us < o->period_us) {
        fprintf(stderr, "rl_host_device: --watchdog-us %lu is shorter than --period-us %lu; give "
                        "a watchdog of at least one period\n",
                o->watchdog_us, o->period_us);
        return 0;
    }
    if (o->period_us < o->min_period_us) {
        fprintf(stderr, "rl_host_device: --period-us %lu is below --min-period-us %lu; give a "
                        "longer period\n",
                o->period_us, o->min_period_us);
        return 0;
    }
    return 1;
}

static int same_address(const struct sockaddr_storage *a, socklen_t a_len,
                        const struct sockaddr_storage *b, socklen_t b_len)
{
    return a_len == b_len && memcmp(a, b, (size_t)a_len) == 0;
}

/* ---- transports --------------------------------------------------------------------------- */

static int open_pty(host_port *h)
{
    struct termios tio;
    const char *slave_name;
    int flags;
    h->fd = posix_openpt(O_RDWR | O_NOCTTY);
    if (h->fd < 0 || grantpt(h->fd) != 0 || unlockpt(h->fd) != 0 ||
        (slave_name = ptsname(h->fd)) == NULL) {
        perror("rl_host_device: cannot create a pseudo-terminal");
        return 0;
    }
    /* Hold the slave side open ourselves, in raw mode: no echo or line editing may touch the
     * binary frames, and the master never sees end-of-file between two host connections. */
    h->pty_slave = open(slave_name, O_RDWR | O_NOCTTY);
    if (h->pty_slave < 0 || tcgetattr(h->pty_slave, &tio) != 0) {
        perror("rl_host_device: cannot open the pseudo-terminal's slave side");
        return 0;
    }
    tio.c_iflag &= (tcflag_t) ~(IGNBRK | BRKINT | PARMRK | ISTRIP | INLCR | IGNCR | ICRNL | IXON);
    tio.c_oflag &= (tcflag_t)~OPOST;
    tio.c_lflag &= (tcflag_t) ~(ECHO | ECHONL | ICANON | ISIG | IEXTEN);
    tio.c_cflag &= (tcflag_t) ~(CSIZE | PARENB);
    tio.c_cflag |= CS8;
    tio.c_cc[VMIN] = 1;
    tio.c_cc[VTIME] = 0;
    if (tcsetattr(h->pty_slave, TCSANOW, &tio) != 0) {
        perror("rl_host_device: cannot set the pseudo-terminal to raw mode");
        return 0;
    }
    flags = fcntl(h->fd, F_GETFL);
    if (flags < 0 || fcntl(h->fd, F_SETFL, flags | O_NONBLOCK) != 0) {
        perror("rl_host_device: cannot make the pseudo-terminal non-blocking");
        return 0;
    }
    printf("PTY %s\n", slave_name);
    fflush(stdout);
    return 1;
}

static int open_udp(host_port *h, const char *spec)
{
    char host[256];
    const char *colon = strrchr(spec, ':');
    const char *port = colon + 1;
    size_t host_len = (size_t)(colon - spec);
    struct addrinfo hints, *res = NULL;
    struct sockaddr_storage bound;
    socklen_t bound_len = sizeof bound;
    char shown_host[256], shown_port[32]; /* NI_MAXHOST is not POSIX */
    int rc, flags;

    if (host_len >= 2 && spec[0] == '[' && spec[host_len - 1] == ']') { /* [::1]:port */
        ++spec;
        host_len -= 2;
    }
    if (host_len == 0 || host_len >= sizeof host || *port == '\0') {
        fprintf(stderr, "rl_host_device: --udp %s: give HOST:PORT, e.g. 127.0.0.1:0\n", spec);
        return 0;
    }
    memcpy(host, spec, host_len);
    host[host_len] = '\0';
    memset(&hints, 0, sizeof hints);
    hints.ai_family = AF_UNSPEC;
    hints.ai_socktype = SOCK_DGRAM;
    hints.ai_flags = AI_PASSIVE | AI_NUMERICSERV;
    rc = getaddrinfo(host, port, &hints, &res);
    if (rc != 0 || res == NULL) {
        fprintf(stderr, "rl_host_device: --udp %s:%s: cannot resolve (%s); give an IP address "
                        "such as 127.0.0.1 and a port number\n",
                host, port, gai_strerror(rc));
        return 0;
    }
    h->fd = socket(res->ai_family, res->ai_socktype, res->ai_protocol);
    if (h->fd < 0 || bind(h->fd, res->ai_addr, res->ai_addrlen) != 0) {
        fprintf(stderr, "rl_host_device: --udp %s:%s: cannot bind (%s); choose a free port "
                        "(0 picks one)\n",
                host, port, strerror(errno));
        freeaddrinfo(res);
        return 0;
    }
    freeaddrinfo(res);
    flags = fcntl(h->fd, F_GETFL);
    if (flags < 0 || fcntl(h->fd, F_SETFL, flags | O_NONBLOCK) != 0 ||
        getsockname(h->fd, (struct sockaddr *)&bound, &bound_len) != 0 ||
        getnameinfo((struct sockaddr *)&bound, bound_len, shown_host, sizeof shown_host,
                    shown_port, sizeof shown_port, NI_NUMERICHOST | NI_NUMERICSERV) != 0) {
        perror("rl_host_device: cannot prepare the UDP socket");
        return 0;
    }
    h->is_udp = 1;
    if (strchr(shown_host, ':') != NULL) {
        printf("UDP [%s]:%s\n", shown_host, shown_port);
    } else {
        printf("UDP %s:%s\n", shown_host, shown_port);
    }
    fflush(stdout);
    return 1;
}

static void receive(host_port *h, rl_device *d)
{
    uint8_t buf[4096];
    for (;;) {
        if (h->is_udp) {
            struct sockaddr_storage from;
            socklen_t from_len = sizeof from;
            const ssize_t n = recvfrom(h->fd, buf, sizeof buf, 0, (struct sockaddr *)&from,
                                       &from_len);
            if (n < 0) {
                return; /* EAGAIN: drained; other errors (ICMP reports) are not ours to fix */
            }
            if (rl_device_bound(d) && !same_address(&from, from_len, &h->bound, h->bound_len)) {
                rl_device_note_foreign(d); /* never acted on, never answered */
                continue;
            }
            h->replying_to = &from;
            h->replying_len = from_len;
            if (rl_device_rx_frame(d, buf, (size_t)n) == RL_REJECT_NONE) {
                memcpy(&h->peer, &from, from_len); /* answer whoever last sent a valid frame */
                h->peer_len = from_len;
                h->have_peer = 1;
            }
            if (rl_device_get_counters(d)->binds != h->binds_seen) {
                h->binds_seen = rl_device_get_counters(d)->binds; /* a CONFIGURE bound us */
                memcpy(&h->bound, &from, from_len);
                h->bound_len = from_len;
            }
            h->replying_to = NULL;
        } else {
            const ssize_t n = read(h->fd, buf, sizeof buf);
            if (n <= 0) {
                return;
            }
            rl_device_rx_bytes(d, buf, (size_t)n);
        }
    }
}

static void print_summary(const rl_device *d, const host_port *h)
{
    const rl_device_counters *c = rl_device_get_counters(d);
    int r;
    fprintf(stderr,
            "rl_host_device: stopped; samples %lu, frames accepted %lu, commands applied %lu, "
            "ignored %lu, watchdog trips %lu, stops %lu, ticks missed %lu, bytes dropped %lu",
            (unsigned long)c->samples_sent, (unsigned long)c->frames_accepted,
            (unsigned long)c->commands_accepted, (unsigned long)c->commands_ignored,
            (unsigned long)c->watchdog_trips, (unsigned long)c->stops,
            (unsigned long)c->ticks_missed, h->bytes_dropped);
    fprintf(stderr, ", foreign %lu, binds %lu, releases %lu", (unsigned long)c->foreign,
            (unsigned long)c->binds, (unsigned long)c->releases);
    for (r = 1; r < (int)RL_REJECT_COUNT; ++r) {
        fprintf(stderr, ", rejected %s %lu", rl_reject_name((rl_reject)r),
                (unsigned long)c->rejected[r]);
    }
    fprintf(stderr, "\n");
}

int main(int argc, char **argv)
{
    static rl_device dev;
    static host_port hp;
    options opt;
    rl_device_config cfg;
    rl_hal hal;
    struct sigaction sa;
    sigset_t blocked, during_wait;
    uint64_t quit_at = 0;
    uint8_t key[RL_AUTH_KEY_MAX];
    size_t key_len = 0;
    FILE *urandom = NULL;

    if (!parse_options(argc, argv, &opt)) {
        return 2;
    }
    if (opt.key_file != NULL) {
        if (!rl_host_load_key(opt.key_file, key, &key_len)) {
            return 2;
        }
        urandom = fopen("/dev/urandom", "rb");
        if (urandom == NULL) {
            perror("rl_host_device: cannot open /dev/urandom for session nonces");
            return 1;
        }
    }
    clock_gettime(CLOCK_MONOTONIC, &hp.start);
    hp.fd = -1;
    hp.pty_slave = -1;

    /* Signals are blocked except inside pselect(), so a SIGTERM can never slip in between the
     * check of stop_requested and the wait. */
    memset(&sa, 0, sizeof sa);
    sa.sa_handler = on_signal;
    sigemptyset(&sa.sa_mask);
    sigaction(SIGTERM, &sa, NULL);
    sigaction(SIGINT, &sa, NULL);
    sigemptyset(&blocked);
    sigaddset(&blocked, SIGTERM);
    sigaddset(&blocked, SIGINT);
    sigprocmask(SIG_BLOCK, &blocked, &during_wait);
    sigdelset(&during_wait, SIGTERM);
    sigdelset(&during_wait, SIGINT);

    if (opt.use_pty ? !open_pty(&hp) : !open_udp(&hp, opt.udp_spec)) {
        return 1;
    }

    rl_host_plant_init(&hp.plant, opt.gain, opt.tau_s, opt.y0, host_micros(&hp));
    hal.ctx = &hp;
    hal.transport = hp.is_udp ? RL_TRANSPORT_DATAGRAM : RL_TRANSPORT_STREAM;
    hal.read_channels = host_read_channels;
    hal.write_actuator = host_write_actuator;
    hal.micros = host_micros;
    hal.write_bytes = host_write_bytes;
    cfg.name = opt.name;
    cfg.fw_version = HOST_FW_VERSION;
    cfg.n_channels = (uint8_t)opt.channels;
    cfg.min_period_us = (uint32_t)opt.min_period_us;
    cfg.max_period_us = 4000000000u;
    cfg.actuator_min = -3.0e38f; /* a simulated plant takes any finite input */
    cfg.actuator_max = 3.0e38f;
    cfg.defaults.period_us = (uint32_t)opt.period_us;
    cfg.defaults.watchdog_us = (uint32_t)opt.watchdog_us;
    cfg.defaults.safe = (float)opt.safe;
    cfg.defaults.u_min = (float)opt.u_min;
    cfg.defaults.u_max = (float)opt.u_max;
    switch (rl_device_init(&dev, &hal, &cfg)) {
    case RL_DEVICE_OK:
        break;
    case RL_DEVICE_BAD_HAL:
        fprintf(stderr, "rl_host_device: internal error: incomplete hal\n");
        return 1;
    case RL_DEVICE_BAD_CONFIG:
    default:
        fprintf(stderr,
                "rl_host_device: defaults refused: need --u-min <= --safe <= --u-max, "
                "--watchdog-us >= --period-us, and --period-us >= --min-period-us "
                "(got safe %g, range [%g, %g], period %lu, watchdog %lu, min period %lu)\n",
                opt.safe, opt.u_min, opt.u_max, opt.period_us, opt.watchdog_us,
                opt.min_period_us);
        return 2;
    }
    if (urandom != NULL) {
        if (rl_device_set_key(&dev, key, key_len, rl_host_urandom_nonce, urandom) != 0) {
            fprintf(stderr, "rl_host_device: key refused\n");
            return 2;
        }
        memset(key, 0, sizeof key);
    }
    if (opt.quit_after_s > 0.0) {
        quit_at = host_micros(&hp) + (uint64_t)(opt.quit_after_s * 1e6);
    }
    fprintf(stderr, "rl_host_device: %s, %u channels, period %lu us, watchdog %lu us, plant "
                    "first-order gain %g tau %g s, %s\n",
            hp.is_udp ? "udp" : "pty", opt.channels, opt.period_us, opt.watchdog_us, opt.gain,
            opt.tau_s, urandom != NULL ? "authenticated frames" : "no key");

    while (!stop_requested) {
        fd_set readable;
        struct timespec wait;
        uint64_t now = host_micros(&hp);
        uint64_t deadline = rl_device_next_deadline_us(&dev);
        uint64_t delta;
        int n;
        if (quit_at != 0 && now >= quit_at) {
            break;
        }
        if (quit_at != 0 && quit_at < deadline) {
            deadline = quit_at;
        }
        delta = deadline > now ? deadline - now : 0;
        wait.tv_sec = (time_t)(delta / 1000000u);
        wait.tv_nsec = (long)(delta % 1000000u) * 1000L;
        FD_ZERO(&readable);
        FD_SET(hp.fd, &readable);
        n = pselect(hp.fd + 1, &readable, NULL, NULL, &wait, &during_wait);
        if (n < 0 && errno != EINTR) {
            perror("rl_host_device: pselect");
            break;
        }
        if (n > 0 && FD_ISSET(hp.fd, &readable)) {
            receive(&hp, &dev);
        }
        rl_device_poll(&dev);
    }

    rl_host_plant_set_input(&hp.plant, host_micros(&hp), (double)rl_device_settings(&dev)->safe);
    print_summary(&dev, &hp);
    if (hp.pty_slave >= 0) {
        close(hp.pty_slave);
    }
    close(hp.fd);
    if (urandom != NULL) {
        fclose(urandom);
    }
    return 0;
}
