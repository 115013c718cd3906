/* Semihosting over BKPT 0xAB: the host's ":tt" stream for output, SYS_EXIT to end. */
#include <stdint.h>
#include <string.h>

#include "semihost.h"

static uintptr_t call(uintptr_t op, const void *arg) {
    register uintptr_t r0 __asm("r0") = op;
    register const void *r1 __asm("r1") = arg;
    __asm volatile("bkpt 0xab" : "+r"(r0) : "r"(r1) : "memory");
    return r0;
}

static intptr_t out_handle = -1;

void semihost_write_bytes(const char *bytes, size_t len) {
    if (out_handle < 0) {
        /* SYS_OPEN ":tt" mode 4 ("w"): the host's standard output. */
        const uintptr_t open_args[3] = {(uintptr_t)":tt", 4, 3};
        out_handle = (intptr_t)call(0x01, open_args);
    }
    const uintptr_t write_args[3] = {(uintptr_t)out_handle, (uintptr_t)bytes, len};
    call(0x05, write_args);
}

void semihost_write(const char *text) { semihost_write_bytes(text, strlen(text)); }

void semihost_exit(int ok) {
    /* ADP_Stopped_ApplicationExit or ADP_Stopped_RunTimeErrorUnknown, passed in r1 on
       32-bit cores. */
    call(0x18, (const void *)(uintptr_t)(ok ? 0x20026 : 0x20023));
    for (;;) {
    }
}
