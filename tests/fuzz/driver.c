/* The C ABI test driver: every file named on the command line goes through gm_exercise (create,
 * bake, every query, every check). Built by -DGLOBEMILL_BUILD_CAPI_DRIVER=ON, under ASan and
 * UBSan with -DGLOBEMILL_SANITIZE=ON.
 *   globemill_capi_driver [--max-triangles N] [--threads N] FILE...
 * Prints one line per file (its status) and a closing "N passed, 0 failed" line; a failed check
 * aborts. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "exercise.h"
#include "globemill.h"

static char* read_file(const char* path, size_t* size) {
    FILE* f = fopen(path, "rb");
    char* data;
    long n;
    if (!f) return NULL;
    if (fseek(f, 0, SEEK_END) != 0 || (n = ftell(f)) < 0 || fseek(f, 0, SEEK_SET) != 0) {
        fclose(f);
        return NULL;
    }
    data = (char*)malloc((size_t)n + 1);
    if (data && fread(data, 1, (size_t)n, f) != (size_t)n) {
        free(data);
        data = NULL;
    }
    fclose(f);
    *size = (size_t)n;
    return data;
}

int main(int argc, char** argv) {
    unsigned long long max_triangles = 20000;
    int threads = 1, i, files = 0, unreadable = 0;
    for (i = 1; i < argc; ++i) {
        if (strcmp(argv[i], "--max-triangles") == 0 && i + 1 < argc) {
            max_triangles = strtoull(argv[++i], NULL, 10);
        } else if (strcmp(argv[i], "--threads") == 0 && i + 1 < argc) {
            threads = atoi(argv[++i]);
        } else {
            size_t size = 0;
            char* text = read_file(argv[i], &size);
            int s;
            if (!text) {
                fprintf(stderr, "%s: cannot read\n", argv[i]);
                ++unreadable;
                continue;
            }
            s = gm_exercise(text, size, max_triangles, threads);
            printf("%s: %s\n", argv[i], gm_status_name(s));
            free(text);
            ++files;
        }
    }
    printf("%d passed, %d failed\n", files, unreadable);
    return unreadable ? 1 : 0;
}
