/*
 * A C client of `tilewise serve` (the policy service of the tilewise wire protocol, version 1;
 * docs/wire-protocol.md). What a solver coupling does each decision: send the observations of
 * its tiles, read back their actions.
 *
 * Build:  cc -std=c99 -O2 -Wall -Wextra -o policy-client examples/policy-client.c
 * Run:    tilewise serve runs/my-run --listen 127.0.0.1:5780 &
 *         ./policy-client 127.0.0.1:5780 < observations.txt
 *         ./policy-client unix:/tmp/tilewise.sock < observations.txt
 * Input:  one tile per line, obsDim numbers separated by blanks (obsDim comes from the server).
 * Output: one tile per line, actDim numbers (%.9g: the float32 value exactly).
 * Option: a third argument N repeats the request N times and prints the mean round-trip time
 *         to standard error (a rough benchmark from the solver's side).
 *
 * Frames are written and read byte by byte in little-endian order, so this works on any host.
 */
#define _POSIX_C_SOURCE 200112L
#include <errno.h>
#include <netdb.h>
#include <netinet/in.h>
#include <netinet/tcp.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <sys/un.h>
#include <time.h>
#include <unistd.h>

#define HEADER_BYTES 16
#define PROTOCOL_VERSION 1
#define MSG_ERROR 0x0001
#define MSG_INFO_REQUEST 0x0010
#define MSG_INFO 0x0011
#define MSG_ACT 0x0012
#define MSG_ACTIONS 0x0013

static void die(const char *what) {
  fprintf(stderr, "policy-client: %s\n", what);
  exit(1);
}

static void put_u16(unsigned char *p, unsigned v) {
  p[0] = (unsigned char)(v & 0xff);
  p[1] = (unsigned char)((v >> 8) & 0xff);
}

static void put_u32(unsigned char *p, uint32_t v) {
  int k;
  for (k = 0; k < 4; k++) p[k] = (unsigned char)((v >> (8 * k)) & 0xff);
}

static uint32_t get_u32(const unsigned char *p) {
  return (uint32_t)p[0] | ((uint32_t)p[1] << 8) | ((uint32_t)p[2] << 16) | ((uint32_t)p[3] << 24);
}

static void put_f32(unsigned char *p, float f) {
  uint32_t bits;
  memcpy(&bits, &f, 4);
  put_u32(p, bits);
}

static float get_f32(const unsigned char *p) {
  uint32_t bits = get_u32(p);
  float f;
  memcpy(&f, &bits, 4);
  return f;
}

static double get_f64(const unsigned char *p) {
  uint64_t bits = (uint64_t)get_u32(p) | ((uint64_t)get_u32(p + 4) << 32);
  double d;
  memcpy(&d, &bits, 8);
  return d;
}

static void write_all(int fd, const unsigned char *p, size_t n) {
  while (n > 0) {
    ssize_t k = write(fd, p, n);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) die("write failed: the server closed the connection");
    p += k;
    n -= (size_t)k;
  }
}

static void read_all(int fd, unsigned char *p, size_t n) {
  while (n > 0) {
    ssize_t k = read(fd, p, n);
    if (k < 0 && errno == EINTR) continue;
    if (k <= 0) die("read failed: the server closed the connection");
    p += k;
    n -= (size_t)k;
  }
}

/* Send one frame (header + payload) in one write: two small writes would meet Nagle's algorithm
 * and the peer's delayed acknowledgement, costing tens of milliseconds per request. */
static void send_frame(int fd, unsigned type, uint32_t id, const unsigned char *payload, uint32_t length) {
  unsigned char *f = malloc(HEADER_BYTES + (size_t)length);
  if (!f) die("out of memory");
  memcpy(f, "TWLW", 4);
  put_u16(f + 4, PROTOCOL_VERSION);
  put_u16(f + 6, type);
  put_u32(f + 8, id);
  put_u32(f + 12, length);
  if (length > 0) memcpy(f + HEADER_BYTES, payload, length);
  write_all(fd, f, HEADER_BYTES + (size_t)length);
  free(f);
}

/* Receive one frame; returns its payload (malloc'd, caller frees) and sets type and length.
 * An ERROR frame is printed and ends the program. */
static unsigned char *recv_frame(int fd, uint32_t expect_id, unsigned *type, uint32_t *length, uint32_t max_length) {
  unsigned char h[HEADER_BYTES];
  unsigned char *p;
  read_all(fd, h, HEADER_BYTES);
  if (memcmp(h, "TWLW", 4) != 0) die("bad magic bytes in a reply");
  *type = (unsigned)h[6] | ((unsigned)h[7] << 8);
  *length = get_u32(h + 12);
  if (*length > (*type == MSG_ERROR ? 8 + 1024 : max_length)) die("reply longer than expected");
  p = malloc(*length + 1);
  if (!p) die("out of memory");
  read_all(fd, p, *length);
  if (*type == MSG_ERROR) {
    p[*length] = 0;
    fprintf(stderr, "policy-client: the server answered error %u: %s\n", (unsigned)(*length >= 8 ? get_u32(p) : 0), *length >= 8 ? (char *)p + 8 : "");
    exit(1);
  }
  if (get_u32(h + 8) != expect_id) die("reply to another request");
  return p;
}

/* "unix:PATH" or "HOST:PORT" ("[v6]:PORT") -> a connected socket. */
static int connect_to(const char *address) {
  int fd = -1;
  if (strncmp(address, "unix:", 5) == 0) {
    struct sockaddr_un sa;
    memset(&sa, 0, sizeof sa);
    sa.sun_family = AF_UNIX;
    if (strlen(address + 5) >= sizeof sa.sun_path) die("unix socket path too long");
    strcpy(sa.sun_path, address + 5);
    fd = socket(AF_UNIX, SOCK_STREAM, 0);
    if (fd < 0 || connect(fd, (struct sockaddr *)&sa, sizeof sa) != 0) die("cannot connect to the unix socket");
    return fd;
  } else {
    char host[256];
    const char *colon = strrchr(address, ':');
    struct addrinfo hints, *res, *ai;
    size_t hl;
    if (!colon) die("address must be HOST:PORT or unix:PATH");
    hl = (size_t)(colon - address);
    if (hl >= sizeof host) die("host name too long");
    memcpy(host, address, hl);
    host[hl] = 0;
    if (host[0] == '[' && hl >= 2 && host[hl - 1] == ']') {
      memmove(host, host + 1, hl - 2);
      host[hl - 2] = 0;
    }
    memset(&hints, 0, sizeof hints);
    hints.ai_family = AF_UNSPEC;
    hints.ai_socktype = SOCK_STREAM;
    if (getaddrinfo(host, colon + 1, &hints, &res) != 0) die("cannot resolve the host");
    for (ai = res; ai; ai = ai->ai_next) {
      fd = socket(ai->ai_family, ai->ai_socktype, ai->ai_protocol);
      if (fd >= 0 && connect(fd, ai->ai_addr, ai->ai_addrlen) == 0) {
        int one = 1; /* requests are small and answered at once: send without delay */
        setsockopt(fd, IPPROTO_TCP, TCP_NODELAY, &one, sizeof one);
        break;
      }
      if (fd >= 0) close(fd);
      fd = -1;
    }
    freeaddrinfo(res);
    if (fd < 0) die("cannot connect to the server");
    return fd;
  }
}

int main(int argc, char **argv) {
  int fd;
  unsigned type;
  uint32_t length, obs_dim, act_dim, max_tiles, tiles = 0, cap = 64, count = 0, t, j, id = 1;
  unsigned char *info, *payload, *reply = NULL;
  float *obs;
  double x;
  long repeat = 1, r;
  struct timespec t0, t1;

  if (argc < 2 || argc > 3) {
    fprintf(stderr, "usage: %s HOST:PORT|unix:PATH [repeat] < observations.txt\n", argv[0]);
    return 2;
  }
  if (argc == 3) repeat = strtol(argv[2], NULL, 10);
  if (repeat < 1) die("repeat must be a positive integer");
  fd = connect_to(argv[1]);

  /* INFO: u32 obsDim, u32 actDim, u32 maxTiles, u32 reserved, f64 actionBound, metadata JSON. */
  send_frame(fd, MSG_INFO_REQUEST, id, NULL, 0);
  info = recv_frame(fd, id, &type, &length, 1u << 24);
  if (type != MSG_INFO || length < 24) die("expected an INFO reply");
  obs_dim = get_u32(info);
  act_dim = get_u32(info + 4);
  max_tiles = get_u32(info + 8);
  fprintf(stderr, "policy-client: %u observations -> %u actions per tile, bound %g, up to %u tiles\n", (unsigned)obs_dim, (unsigned)act_dim,
          get_f64(info + 16), (unsigned)max_tiles);
  free(info);

  /* Observations from standard input. */
  obs = malloc(sizeof(float) * cap * obs_dim);
  if (!obs) die("out of memory");
  while (scanf("%lf", &x) == 1) {
    if (count == cap * obs_dim) {
      float *more = realloc(obs, sizeof(float) * 2 * cap * obs_dim);
      if (!more) die("out of memory");
      obs = more;
      cap *= 2;
    }
    obs[count++] = (float)x;
  }
  if (!feof(stdin)) die("standard input holds something that is not a number");
  if (count % obs_dim != 0) die("the number of values read is not a multiple of obsDim");
  tiles = count / obs_dim;
  if (tiles == 0) die("no observations on standard input");
  if (tiles > max_tiles) die("more tiles than the server accepts in one request");

  /* ACT: u32 tiles, u32 obsDim, f32 obs[tiles][obsDim]. */
  length = 8 + 4 * tiles * obs_dim;
  payload = malloc(length);
  if (!payload) die("out of memory");
  put_u32(payload, tiles);
  put_u32(payload + 4, obs_dim);
  for (j = 0; j < tiles * obs_dim; j++) put_f32(payload + 8 + 4 * j, obs[j]);

  clock_gettime(CLOCK_MONOTONIC, &t0);
  for (r = 0; r < repeat; r++) {
    id++;
    free(reply);
    send_frame(fd, MSG_ACT, id, payload, length);
    reply = recv_frame(fd, id, &type, &length, 8 + 4 * tiles * act_dim);
    if (type != MSG_ACTIONS || length != 8 + 4 * tiles * act_dim || get_u32(reply) != tiles || get_u32(reply + 4) != act_dim) die("malformed ACTIONS reply");
    length = 8 + 4 * tiles * obs_dim;
  }
  clock_gettime(CLOCK_MONOTONIC, &t1);
  if (repeat > 1) {
    double us = ((double)(t1.tv_sec - t0.tv_sec) * 1e9 + (double)(t1.tv_nsec - t0.tv_nsec)) / 1e3 / (double)repeat;
    fprintf(stderr, "policy-client: %ld round trips of %u tiles, %.1f us each, %.0f tile actions per second\n", repeat, (unsigned)tiles, us, tiles / us * 1e6);
  }

  /* ACTIONS: u32 tiles, u32 actDim, f32 actions[tiles][actDim]. */
  for (t = 0; t < tiles; t++) {
    for (j = 0; j < act_dim; j++) printf(j ? " %.9g" : "%.9g", (double)get_f32(reply + 8 + 4 * (t * act_dim + j)));
    printf("\n");
  }
  free(reply);
  free(payload);
  free(obs);
  close(fd);
  return 0;
}
