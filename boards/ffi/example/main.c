/*
 * hone from C: the demo's calibration session on the LM3S6965 (Cortex-M3) under QEMU,
 * through the C interface only (hone.h, libhone_ffi.a).
 *
 * The model blob and samples come from session_data.h, which the host test writes from the
 * same session the Rust firmware runs (host-cli/host/tests/c_example_qemu.rs). The firmware:
 *
 *   1. starts a session in a static memory block sized by hone_memory_size;
 *   2. runs a guarded calibration on the calibration samples, prints the verdict and the
 *      trained weights, and commits a checkpoint to a flash simulated in RAM through the
 *      flash callbacks;
 *   3. starts again from the factory blob, runs a guarded calibration on the mislabelled
 *      samples (the guard rolls back), prints the verdict and weights;
 *   4. loads the committed checkpoint and prints the weights again.
 *
 * Output goes through semihosting (SYS_WRITE0) as lines "<name> <hex bytes>" or
 * "<name> <number>"; the exit code (SYS_EXIT_EXTENDED) is 0 on success, 1 on a hone error,
 * 3 on a fault.
 */
#include <stddef.h>
#include <stdint.h>

#include "hone.h"
#include "session_data.h"

/* ---- semihosting ---- */

static int semihost(int op, void *arg)
{
    register int r0 __asm__("r0") = op;
    register void *r1 __asm__("r1") = arg;
    __asm__ volatile("bkpt 0xAB" : "+r"(r0) : "r"(r1) : "memory");
    return r0;
}

static void put(const char *s) { semihost(0x04, (void *)s); }

static void __attribute__((noreturn)) finish(uint32_t code)
{
    uint32_t block[2] = {0x20026u, code}; /* ADP_Stopped_ApplicationExit */
    semihost(0x20, block);
    for (;;) {
    }
}

static char line[600];

static void put_u32(const char *name, uint32_t v)
{
    char *p = line;
    while (*name) *p++ = *name++;
    *p++ = ' ';
    char digits[11];
    int n = 0;
    do {
        digits[n++] = (char)('0' + v % 10u);
        v /= 10u;
    } while (v);
    while (n) *p++ = digits[--n];
    *p++ = '\n';
    *p = 0;
    put(line);
}

/* "<name> <hex>" in lines of at most 256 bytes; the host joins lines of the same name. */
static void put_hex(const char *name, const uint8_t *b, size_t len)
{
    static const char hex[] = "0123456789abcdef";
    size_t at = 0;
    do {
        char *p = line;
        for (const char *q = name; *q;) *p++ = *q++;
        *p++ = ' ';
        for (size_t i = 0; i < 256 && at < len; i++, at++) {
            *p++ = hex[b[at] >> 4];
            *p++ = hex[b[at] & 15u];
        }
        *p++ = '\n';
        *p = 0;
        put(line);
    } while (at < len);
}

static void check(int32_t status, const char *what)
{
    if (status != HONE_OK) {
        put("error ");
        put(what);
        put(": ");
        put(hone_error_str(status));
        put("\n");
        finish(1);
    }
}

/* ---- a NOR flash in RAM, for the checkpoint store: 8 sectors of 1 KiB ---- */

#define FLASH_SECTOR 1024u
#define FLASH_BYTES (8u * FLASH_SECTOR)
static uint8_t flash_ram[FLASH_BYTES];

static int32_t flash_read(void *ctx, uint32_t off, uint8_t *buf, uint32_t len)
{
    (void)ctx;
    if (off > FLASH_BYTES || len > FLASH_BYTES - off) return -1;
    for (uint32_t i = 0; i < len; i++) buf[i] = flash_ram[off + i];
    return 0;
}

static int32_t flash_write(void *ctx, uint32_t off, const uint8_t *data, uint32_t len)
{
    (void)ctx;
    if (off > FLASH_BYTES || len > FLASH_BYTES - off) return -1;
    for (uint32_t i = 0; i < len; i++) flash_ram[off + i] &= data[i]; /* NOR clears bits */
    return 0;
}

static int32_t flash_erase(void *ctx, uint32_t from, uint32_t to)
{
    (void)ctx;
    if (from > to || to > FLASH_BYTES) return -1;
    for (uint32_t i = from; i < to; i++) flash_ram[i] = 0xFF;
    return 0;
}

/* ---- the session ---- */

/* The session's memory: checked against hone_memory_size at start. */
static uint64_t memory[24 * 1024 / 8];
static uint8_t scratch[2048];
static uint8_t weights[1024];

static HoneSample calib[CALIB_COUNT], faulty[CALIB_COUNT], holdout[HOLDOUT_COUNT];

static HoneTarget target(const TARGET_T *values, const uint16_t *labels, size_t i)
{
    HoneTarget t = {0};
    if (values) {
        t.values = values + i * N_OUT;
        t.count = N_OUT;
        t.word_bits = TARGET_BITS;
        t.frac = TARGET_FRAC;
    } else {
        t.label = labels[i];
    }
    return t;
}

static HoneSession *start(void)
{
    size_t need = 0;
    check(hone_memory_size(MODEL_BLOB, sizeof MODEL_BLOB, &need), "memory size");
    if (need > sizeof memory) {
        put_u32("memory-too-small-needs", (uint32_t)need);
        finish(1);
    }
    HoneSession *s = 0;
    check(hone_init(memory, sizeof memory, MODEL_BLOB, sizeof MODEL_BLOB, &s), "init");
    return s;
}

static void report(const char *set, HoneSession *s, const HoneReport *r)
{
    size_t n = 0;
    check(hone_weights(s, weights, sizeof weights, &n), "weights");
    put_u32(set[0] == 'c' ? "calib_accepted" : "faulty_accepted", r->accepted);
    put_u32(set[0] == 'c' ? "calib_trained" : "faulty_trained", r->trained);
    put_hex(set, weights, n);
}

int main(void)
{
    for (size_t i = 0; i < CALIB_COUNT; i++) {
        calib[i].x = CALIB_X + i * N_IN;
        calib[i].y = target(CALIB_Y, CALIB_LABELS, i);
        faulty[i].x = CALIB_X + i * N_IN;
        faulty[i].y = target(FAULTY_Y, FAULTY_LABELS, i);
    }
    for (size_t i = 0; i < HOLDOUT_COUNT; i++) {
        holdout[i].x = HOLDOUT_X + i * N_IN;
        holdout[i].y = target(HOLDOUT_Y, HOLDOUT_LABELS, i);
    }
    HoneFlash flash = {0, FLASH_BYTES, FLASH_SECTOR, flash_read, flash_write, flash_erase};
    for (uint32_t i = 0; i < FLASH_BYTES; i++) flash_ram[i] = 0xFF;

    size_t need = 0;
    check(hone_memory_size(MODEL_BLOB, sizeof MODEL_BLOB, &need), "memory size");
    put_u32("memory_bytes", (uint32_t)need);

    /* 2. The calibration samples, guarded, then a checkpoint. */
    HoneSession *s = start();
    HoneReport r;
    check(hone_calibrate(s, calib, CALIB_COUNT, PASSES, holdout, HOLDOUT_COUNT, 0, 0, 0, &r),
          "calibrate");
    report("calib_weights", s, &r);
    size_t ck = 0;
    check(hone_checkpoint_size(s, &ck), "checkpoint size");
    if (ck > sizeof scratch) {
        put_u32("scratch-too-small-needs", (uint32_t)ck);
        finish(1);
    }
    uint32_t seq = 0;
    check(hone_checkpoint_save(s, &flash, 0, FLASH_BYTES, scratch, sizeof scratch, &seq),
          "checkpoint save");
    put_u32("checkpoint_seq", seq);
    put_hex("calib_checkpoint", scratch, ck);

    /* 3. From the factory blob again: the mislabelled samples, which the guard rejects. */
    s = start();
    check(hone_calibrate(s, faulty, CALIB_COUNT, PASSES, holdout, HOLDOUT_COUNT, 0, 0, 0, &r),
          "calibrate faulty");
    report("faulty_weights", s, &r);

    /* 4. The committed checkpoint back from flash. */
    check(hone_checkpoint_load(s, &flash, 0, FLASH_BYTES, scratch, sizeof scratch),
          "checkpoint load");
    size_t n = 0;
    check(hone_weights(s, weights, sizeof weights, &n), "weights");
    put_hex("loaded_weights", weights, n);
    put("done\n");
    finish(0);
}

/* ---- start-up ---- */

extern uint32_t _estack, _sidata, _sdata, _edata, _sbss, _ebss;

void __attribute__((noreturn)) reset_handler(void)
{
    uint32_t *src = &_sidata;
    for (uint32_t *dst = &_sdata; dst < &_edata;) *dst++ = *src++;
    for (uint32_t *dst = &_sbss; dst < &_ebss;) *dst++ = 0;
    main();
    finish(0);
}

static void __attribute__((noreturn)) fault_handler(void)
{
    put("fault\n");
    finish(3);
}

__attribute__((section(".vectors"), used)) static const void *const vectors[16] = {
    &_estack,      (void *)reset_handler, (void *)fault_handler, (void *)fault_handler,
    (void *)fault_handler, (void *)fault_handler, (void *)fault_handler, 0,
    0, 0, 0, (void *)fault_handler,
    (void *)fault_handler, 0, (void *)fault_handler, (void *)fault_handler,
};
