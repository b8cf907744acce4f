/* One spec text through the whole C ABI, checking every answer; shared by the libFuzzer target
 * (fuzz_capi.c) and the sanitizer driver (driver.c). */
#ifndef GLOBEMILL_EXERCISE_H
#define GLOBEMILL_EXERCISE_H

#include <stddef.h>
#include <stdint.h>

/* Create a world from `text`, bake it (budget capped at max_triangles, `threads` workers),
 * read back every count and array, and check what each call answers: status and message agree,
 * indices stay in range, short buffers are refused. A failed check aborts (the fuzzer's crash).
 * Returns the status of the first failing create/bake call (0 when the bake succeeded). */
int gm_exercise(const char* text, size_t size, uint64_t max_triangles, int threads);

#endif
