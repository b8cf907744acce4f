/* libFuzzer target: bytes as spec text through the spec reader, the validator and the whole C ABI
 * (create, bake with a small triangle budget, every query). Built by -DGLOBEMILL_BUILD_FUZZ=ON
 * with clang; run: globemill_fuzz -max_total_time=60 NEW_CORPUS_DIR tests/fuzz/corpus */
#include <stddef.h>
#include <stdint.h>

#include "exercise.h"

int LLVMFuzzerTestOneInput(const uint8_t* data, size_t size) {
    /* one worker thread and a small budget keep each input fast */
    gm_exercise((const char*)data, size, 20000, 1);
    return 0;
}
