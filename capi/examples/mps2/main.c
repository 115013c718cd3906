/* The C example firmware: opens the model the host's loader placed in the job block at
   0x2010_0000 (the layout of bench/firmware/src/lib.rs), or with MIDGE_EMBEDDED_MODEL the
   one `midge quantize --c-source model.c` put in flash, runs every input of the job with
   per-layer SysTick readings from the layer hook, and prints over semihosting the harness
   line protocol that midge_bench::firmware::parse_report reads. */
#include <stddef.h>
#include <stdint.h>
#include <string.h>

#include "midge.h"
#include "semihost.h"
#ifdef MIDGE_EMBEDDED_MODEL
#include "model.h" /* written by `midge quantize --c-source model.c` */
#endif

/* The job block: 64-byte header ("midgejob", then little-endian u32 version 1, model
   offset, model length, input offset, input length, input count, workspace offset). */
#define JOB_ADDR 0x20100000u
#define JOB_CAPACITY (3u * 1024u * 1024u)
#define JOB_HEADER_LEN 64u
#define MAX_LAYERS 512u

/* SysTick (Armv7-M ARM B3.3): free running on the core clock, 24 bits, counting down. */
#define SYST_CSR (*(volatile uint32_t *)0xE000E010u)
#define SYST_RVR (*(volatile uint32_t *)0xE000E014u)
#define SYST_CVR (*(volatile uint32_t *)0xE000E018u)
#define SYST_MASK 0x00FFFFFFu

static MidgeModel model; /* placed statically: MIDGE_MODEL_SIZE bytes, 8-byte aligned */

struct clock {
    uint32_t before;
    uint32_t ticks[MAX_LAYERS];
};
static struct clock clock;

static uint32_t now(void) { return SYST_CVR & SYST_MASK; }

/* Ticks from `earlier` to `later` of the down counter (one wrap at most). */
static uint32_t elapsed(uint32_t earlier, uint32_t later) { return (earlier - later) & SYST_MASK; }

static void on_layer(void *user, uint32_t layer, uint32_t phase, const uint8_t *output,
                     size_t output_len) {
    struct clock *c = user;
    uint32_t t = now();
    (void)output;
    (void)output_len;
    if (phase == MIDGE_BEFORE_LAYER) {
        c->before = t;
    } else if (layer < MAX_LAYERS) {
        c->ticks[layer] = elapsed(c->before, t);
    }
}

static void put_u32(uint32_t v) {
    char buf[11];
    size_t i = sizeof buf;
    do {
        buf[--i] = (char)('0' + v % 10u);
        v /= 10u;
    } while (v != 0);
    semihost_write_bytes(buf + i, sizeof buf - i);
}

static void put_hex(const uint8_t *bytes, size_t len) {
    static const char digits[] = "0123456789abcdef";
    char buf[128];
    while (len > 0) {
        size_t n = len < 64 ? len : 64;
        for (size_t i = 0; i < n; i++) {
            buf[2 * i] = digits[bytes[i] >> 4];
            buf[2 * i + 1] = digits[bytes[i] & 15u];
        }
        semihost_write_bytes(buf, 2 * n);
        bytes += n;
        len -= n;
    }
}

static int fail(const char *what, int32_t status) {
    semihost_write("error ");
    semihost_write(what);
    semihost_write(": ");
    semihost_write(midge_status_text(status));
    semihost_write("\n");
    return 1;
}

/* Waits for the next tick edge, so two measurements start at the same tick phase. */
static void tick_edge(void) {
    uint32_t v = now();
    while (now() == v) {
    }
}

/* `iters` loops of 40 (or 80) NOPs plus the same loop code around them: the two differ
   by exactly 40 NOPs per iteration, which is what the calibration reads. Each in its own
   function so no short branch spans the block. */
__attribute__((noinline)) static void nops40(uint32_t iters) {
    for (; iters != 0; iters--) {
        __asm volatile(".rept 40\n nop\n .endr");
    }
}

__attribute__((noinline)) static void nops80(uint32_t iters) {
    for (; iters != 0; iters--) {
        __asm volatile(".rept 80\n nop\n .endr");
    }
}

/* Ticks `f` takes, started right after a tick edge. */
static uint32_t ticks_of(void (*f)(uint32_t), uint32_t iters) {
    tick_edge();
    uint32_t t0 = now();
    f(iters);
    return elapsed(t0, now());
}

static uint32_t word(const uint8_t *head, unsigned i) {
    const uint8_t *p = head + 8 + 4 * i;
    return (uint32_t)p[0] | (uint32_t)p[1] << 8 | (uint32_t)p[2] << 16 | (uint32_t)p[3] << 24;
}

int main(void) {
    SYST_RVR = SYST_MASK;
    SYST_CVR = 0;
    SYST_CSR = 0x5; /* enable, core clock, no interrupt */
    semihost_write("harness 1\ncalibration a=");
    put_u32(ticks_of(nops40, 1000));
    semihost_write(" b=");
    put_u32(ticks_of(nops80, 1000));
    semihost_write("\n");

    const uint8_t *job = (const uint8_t *)JOB_ADDR;
    if (memcmp(job, "midgejob", 8) != 0 || word(job, 0) != 1) {
        semihost_write("error no job block at 0x20100000 (bad magic or version)\n");
        return 1;
    }
    uint32_t model_off = word(job, 1), model_len = word(job, 2), input_off = word(job, 3);
    uint32_t input_len = word(job, 4), input_count = word(job, 5), ws_off = word(job, 6);
    uint64_t inputs_end = (uint64_t)input_off + (uint64_t)input_len * input_count;
    if ((uint64_t)model_off + model_len > ws_off || inputs_end > ws_off || ws_off > JOB_CAPACITY) {
        semihost_write("error job block fields reach outside the job area\n");
        return 1;
    }

#ifdef MIDGE_EMBEDDED_MODEL
    (void)model_off;
    (void)model_len;
    int32_t status = midge_open(&model, model_model, model_model_len);
#else
    int32_t status = midge_open(&model, job + model_off, model_len);
#endif
    if (status != MIDGE_STATUS_OK) {
        return fail("model", status);
    }
    size_t ws_len = midge_workspace_size(&model);
    if (ws_len > JOB_CAPACITY - ws_off) {
        semihost_write("error workspace does not fit in the job area\n");
        return 1;
    }
    uint8_t *workspace = (uint8_t *)(JOB_ADDR + ws_off);
    uint32_t layers = midge_layer_count(&model);
    if (layers > MAX_LAYERS) {
        semihost_write("error more layers than the harness keeps readings for\n");
        return 1;
    }
    semihost_write("model layers=");
    put_u32(layers);
    semihost_write(" workspace=");
    put_u32((uint32_t)ws_len);
    semihost_write("\n");

    for (uint32_t k = 0; k < input_count; k++) {
        const uint8_t *output;
        size_t output_len;
        status = midge_run_observed(&model, job + input_off + (size_t)k * input_len, input_len,
                                    workspace, ws_len, &output, &output_len, on_layer, &clock);
        if (status != MIDGE_STATUS_OK) {
            return fail("run", status);
        }
        uint32_t cls;
        status = midge_argmax(&model, output, output_len, &cls);
        if (status != MIDGE_STATUS_OK) {
            return fail("argmax", status);
        }
        const char *label;
        size_t label_len;
        status = midge_label(&model, cls, &label, &label_len);
        if (status != MIDGE_STATUS_OK) {
            return fail("label", status);
        }
        semihost_write("run ");
        put_u32(k);
        semihost_write("\n");
        for (uint32_t i = 0; i < layers; i++) {
            semihost_write("layer ");
            put_u32(i);
            semihost_write(" ");
            put_u32(clock.ticks[i]);
            semihost_write("\n");
        }
        semihost_write("class ");
        put_u32(k);
        semihost_write(" ");
        put_u32(cls);
        semihost_write(" ");
        semihost_write_bytes(label, label_len);
        semihost_write("\noutput ");
        put_u32(k);
        semihost_write(" ");
        put_hex(output, output_len);
        semihost_write("\n");
    }
    semihost_write("end\n");
    return 0;
}
