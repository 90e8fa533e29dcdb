/*
 * A Modbus peer built on libmodbus (a third-party implementation) for the
 * driver tests. The register map is filled with libmodbus's own encoders so
 * the values on the wire do not come from plateau's codec.
 *
 *   peer tcp PORT [DELAY_MS]        serve Modbus TCP on 127.0.0.1:PORT
 *   peer rtu DEVICE [DELAY_MS]      serve Modbus RTU (unit 1, 19200 8N1) on DEVICE
 *   peer bench PORT COUNT           time COUNT reads of 2 holding registers
 *
 * The 32-bit float orders are laid out from the IEEE-754 bytes A B C D by the
 * table of REFERENCES.md §9.2 (reg n = AB, reg n+1 = CD for ABCD, and so on).
 * libmodbus 3.1.6's modbus_set_float_abcd/badc/cdab/dcba are not used for
 * this: on a little-endian host its "abcd" writes F642 79E9 for 123.456f,
 * which is BADC in that table (the naming confusion of libmodbus issue #358).
 * The tests confirm the layout with mbpoll, a second third-party decoder.
 *
 * Holding and input registers (0-based wire addresses):
 *   0      int16  -12345
 *   1      uint16 54321
 *   2-3    int32  -123456789     (MODBUS_SET_INT32_TO_INT16: ABCD)
 *   4-5    uint32 3000000000     (ABCD)
 *   10-11  float  123.456  ABCD  
 *   12-13  float  123.456  BADC
 *   14-15  float  123.456  CDAB
 *   16-17  float  123.456  DCBA
 *   20-23  double -101325.0625 ABCDEFGH (MODBUS_SET_INT64_TO_INT16)
 *   24-25  float  12.0     ABCD  (a 4–20 mA loop at mid-scale)
 *   26-27  float  2.0      ABCD  (a loop current that signals a fault)
 *   30-31  setpoint area, 0 at start
 * Discrete input 2 is on ("setpoint reached"); coils start off.
 */
#include <errno.h>
#include <modbus/modbus.h>
#include <stdint.h>
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <sys/socket.h>
#include <time.h>
#include <unistd.h>

/* put32 stores the big-endian bytes A B C D of v in the named order. */
static void put32(uint16_t *r, uint32_t v, const char *order) {
    uint8_t a = v >> 24, b = v >> 16, c = v >> 8, d = v;
    if (strcmp(order, "ABCD") == 0) { r[0] = a << 8 | b; r[1] = c << 8 | d; }
    if (strcmp(order, "BADC") == 0) { r[0] = b << 8 | a; r[1] = d << 8 | c; }
    if (strcmp(order, "CDAB") == 0) { r[0] = c << 8 | d; r[1] = a << 8 | b; }
    if (strcmp(order, "DCBA") == 0) { r[0] = d << 8 | c; r[1] = b << 8 | a; }
}

static uint32_t fbits(float f) {
    uint32_t u;
    memcpy(&u, &f, sizeof u);
    return u;
}

static void fill(uint16_t *r) {
    int32_t i32 = -123456789;
    uint32_t u32 = 3000000000u;
    double d = -101325.0625;
    uint64_t u64;
    r[0] = (uint16_t)(int16_t)-12345;
    r[1] = 54321;
    MODBUS_SET_INT32_TO_INT16(r, 2, (uint32_t)i32);
    MODBUS_SET_INT32_TO_INT16(r, 4, u32);
    put32(r + 10, fbits(123.456f), "ABCD");
    put32(r + 12, fbits(123.456f), "BADC");
    put32(r + 14, fbits(123.456f), "CDAB");
    put32(r + 16, fbits(123.456f), "DCBA");
    memcpy(&u64, &d, sizeof u64);
    MODBUS_SET_INT64_TO_INT16(r, 20, u64);
    put32(r + 24, fbits(12.0f), "ABCD");
    put32(r + 26, fbits(2.0f), "ABCD");
}

static int bench(int port, int count) {
    modbus_t *ctx = modbus_new_tcp("127.0.0.1", port);
    uint16_t regs[2];
    struct timespec t0, t1;
    if (ctx == NULL || modbus_connect(ctx) == -1) {
        fprintf(stderr, "connect: %s\n", modbus_strerror(errno));
        return 1;
    }
    clock_gettime(CLOCK_MONOTONIC, &t0);
    for (int i = 0; i < count; i++) {
        if (modbus_read_registers(ctx, 10, 2, regs) != 2) {
            fprintf(stderr, "read: %s\n", modbus_strerror(errno));
            return 1;
        }
    }
    clock_gettime(CLOCK_MONOTONIC, &t1);
    printf("%d %.6f\n", count, (t1.tv_sec - t0.tv_sec) + (t1.tv_nsec - t0.tv_nsec) / 1e9);
    modbus_close(ctx);
    modbus_free(ctx);
    return 0;
}

static void serve(modbus_t *ctx, modbus_mapping_t *map, int delay_ms) {
    uint8_t req[MODBUS_TCP_MAX_ADU_LENGTH];
    for (;;) {
        int n = modbus_receive(ctx, req);
        if (n == 0) continue; /* frame for another unit */
        if (n < 0) return;    /* peer closed or line error */
        if (delay_ms > 0) usleep(delay_ms * 1000);
        modbus_reply(ctx, req, n, map);
    }
}

int main(int argc, char **argv) {
    if (argc < 3) {
        fprintf(stderr, "usage: peer tcp PORT [DELAY_MS] | rtu DEVICE [DELAY_MS] | bench PORT COUNT\n");
        return 2;
    }
    if (strcmp(argv[1], "bench") == 0) return bench(atoi(argv[2]), argc > 3 ? atoi(argv[3]) : 1000);
    int delay_ms = argc > 3 ? atoi(argv[3]) : 0;
    modbus_mapping_t *map = modbus_mapping_new(10, 10, 100, 100);
    fill(map->tab_registers);
    memcpy(map->tab_input_registers, map->tab_registers, 100 * sizeof(uint16_t));
    map->tab_input_bits[2] = 1;
    setvbuf(stdout, NULL, _IONBF, 0);
    if (strcmp(argv[1], "tcp") == 0) {
        modbus_t *ctx = modbus_new_tcp("127.0.0.1", atoi(argv[2]));
        int s = modbus_tcp_listen(ctx, 1);
        if (s == -1) {
            fprintf(stderr, "listen: %s\n", modbus_strerror(errno));
            return 3;
        }
        printf("ready\n");
        for (;;) {
            if (modbus_tcp_accept(ctx, &s) == -1) return 4;
            serve(ctx, map, delay_ms);
            close(modbus_get_socket(ctx));
        }
    }
    modbus_t *ctx = modbus_new_rtu(argv[2], 19200, 'N', 8, 1);
    modbus_set_slave(ctx, 1);
    if (modbus_connect(ctx) == -1) {
        fprintf(stderr, "open %s: %s\n", argv[2], modbus_strerror(errno));
        return 3;
    }
    printf("ready\n");
    for (;;) serve(ctx, map, delay_ms);
}
