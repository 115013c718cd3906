/* Semihosting calls the example prints and exits with (Arm semihosting specification:
   SYS_OPEN 0x01, SYS_WRITE 0x05, SYS_EXIT 0x18, made with BKPT 0xAB on M-profile cores). */
#ifndef SEMIHOST_H
#define SEMIHOST_H

#include <stddef.h>

/** Writes `text` (NUL-terminated) to the host's standard output. */
void semihost_write(const char *text);
/** Writes `len` bytes at `bytes` to the host's standard output. */
void semihost_write_bytes(const char *bytes, size_t len);
/** Ends the emulation: application exit when `ok`, a run-time error otherwise. */
void semihost_exit(int ok) __attribute__((noreturn));

#endif
