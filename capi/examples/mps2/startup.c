/* Minimal Cortex-M start-up for the MPS2 example: the vector table, a reset handler that
   copies .data, clears .bss, turns the FPU on where the build uses it and calls main, and
   a fault handler that ends the emulation with a failure. */
#include <stdint.h>

#include "semihost.h"

extern uint32_t __data_start[], __data_end[], __data_load[], __bss_start[], __bss_end[];
extern uint32_t __stack_top[];
int main(void);

void reset_handler(void) {
    uint32_t *src = __data_load;
    for (uint32_t *dst = __data_start; dst < __data_end;) {
        *dst++ = *src++;
    }
    for (uint32_t *dst = __bss_start; dst < __bss_end;) {
        *dst++ = 0;
    }
#if defined(__ARM_FP)
    /* CPACR: full access to coprocessors 10 and 11 (the FPU), Armv7-M ARM B3.2.20. */
    *(volatile uint32_t *)0xE000ED88u |= 0xFu << 20;
    __asm volatile("dsb\n isb" ::: "memory");
#endif
    semihost_exit(main() == 0);
}

static void fault_handler(void) {
    semihost_write("error core fault\n");
    semihost_exit(0);
}

typedef void (*vector)(void);

__attribute__((section(".vectors"), used)) static const vector vectors[16] = {
    (vector)__stack_top, reset_handler, fault_handler, fault_handler,
    fault_handler,       fault_handler, fault_handler, 0,
    0,                   0,             0,             fault_handler,
    fault_handler,       0,             fault_handler, fault_handler,
};
