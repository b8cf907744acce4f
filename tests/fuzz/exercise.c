/* One spec text through the whole C ABI (see exercise.h). Plain C99 so it also checks that the
 * public header compiles as C. */
#include "exercise.h"

#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "globemill.h"

#define CHECK(cond)                                                                     \
    do {                                                                                \
        if (!(cond)) {                                                                  \
            fprintf(stderr, "exercise: check failed at %s:%d: %s\n", __FILE__, __LINE__, \
                    #cond);                                                             \
            abort();                                                                    \
        }                                                                               \
    } while (0)

/* a status and its message agree: GM_OK with "" or a failure with a message */
static void check_error(gm_status s, const gm_error* err) {
    CHECK(err->status == (int32_t)s);
    CHECK(memchr(err->message, '\0', sizeof err->message) != NULL);
    if (s == GM_OK)
        CHECK(err->message[0] == '\0');
    else
        CHECK(err->message[0] != '\0');
}

static void* alloc(size_t n, size_t size) {
    void* p = calloc(n ? n : 1, size);
    CHECK(p != NULL);
    return p;
}

/* a copy call with a buffer one element short must be refused, then succeed with the full one */
#define COPY(type, count, call_with)                                           \
    do {                                                                       \
        size_t n_ = (size_t)(count);                                           \
        if (n_ > 0) {                                                          \
            type* short_ = (type*)alloc(n_, sizeof(type));                     \
            size_t cap_ = n_ - 1;                                              \
            type* dst_ = short_;                                               \
            gm_status s_ = call_with;                                          \
            CHECK(s_ == GM_ERROR_BUFFER_TOO_SMALL);                            \
            check_error(s_, &err);                                             \
            free(short_);                                                      \
        }                                                                      \
        {                                                                      \
            size_t cap_ = n_;                                                  \
            type* dst_ = buf_##type = (type*)realloc(buf_##type, (n_ ? n_ : 1) * sizeof(type)); \
            CHECK(dst_ != NULL);                                               \
            gm_status s_ = call_with;                                          \
            check_error(s_, &err);                                             \
            CHECK(s_ == GM_OK);                                                \
        }                                                                      \
    } while (0)

typedef double f64;
typedef float f32;
typedef uint32_t u32;
typedef uint8_t u8;

int gm_exercise(const char* text, size_t size, uint64_t max_triangles, int threads) {
    gm_error err;
    gm_world* world = (gm_world*)1;
    gm_bake* bake = (gm_bake*)1;
    f64* buf_f64 = NULL;
    f32* buf_f32 = NULL;
    u32* buf_u32 = NULL;
    u8* buf_u8 = NULL;
    char small[16];
    size_t full = 0;
    char* message;
    gm_status s, checked;

    /* the full message from gm_spec_check, then the same verdict from gm_world_create */
    checked = gm_spec_check(small, sizeof small, &full, text, size);
    CHECK(strlen(small) < sizeof small);
    message = (char*)alloc(full + 1, 1);
    CHECK(gm_spec_check(message, full + 1, &full, text, size) == checked);
    CHECK(strlen(message) == full);
    CHECK((checked == GM_OK) == (full == 0));
    free(message);

    s = gm_world_create(&world, text, size, &err);
    check_error(s, &err);
    CHECK(s == checked);
    if (s != GM_OK) {
        CHECK(world == NULL);
        CHECK(s == GM_ERROR_PARSE || s == GM_ERROR_SPEC);
        return (int)s;
    }
    {
        gm_world_info wi;
        double dirs[9] = {0, 1, 0, 0.3, -0.2, 0.9, 0, 0, 0};
        double h[3], g[9];
        s = gm_world_get_info(&wi, world, &err);
        check_error(s, &err);
        CHECK(s == GM_OK && wi.radius_m >= 1 && wi.tolerance_m > 0);
        CHECK(wi.chunk_count == 20u << (2 * wi.chunk_level));
        COPY(f64, 16 * (size_t)wi.feature_count, gm_world_features(dst_, cap_, world, &err));
        s = gm_world_height(h, 2, world, dirs, 2, &err);
        check_error(s, &err);
        CHECK(s == GM_OK && h[0] == h[0] && h[1] == h[1]);
        s = gm_world_gradient(g, 6, world, dirs, 2, &err);
        check_error(s, &err);
        CHECK(s == GM_OK);
        /* a zero direction is refused */
        s = gm_world_height(h, 3, world, dirs, 3, &err);
        check_error(s, &err);
        CHECK(s == GM_ERROR_INVALID_ARGUMENT);
    }
    {
        /* deprecation messages: the size query, the full text (lines without empty ones), then
         * a short buffer gets a NUL-terminated prefix cut at a character boundary */
        size_t n = 1, again = 0, cut;
        char* lines;
        s = gm_world_warnings(NULL, 0, &n, world, &err);
        check_error(s, &err);
        CHECK(s == GM_OK);
        lines = (char*)alloc(n + 1, 1);
        s = gm_world_warnings(lines, n + 1, &again, world, &err);
        check_error(s, &err);
        CHECK(s == GM_OK && again == n && strlen(lines) == n);
        CHECK(n == 0 || (lines[0] != '\n' && lines[n - 1] != '\n' && strstr(lines, "\n\n") == NULL));
        CHECK(n == 0 || strstr(lines, " is deprecated and will not be read after this release") != NULL);
        s = gm_world_warnings(small, sizeof small, &again, world, &err);
        check_error(s, &err);
        cut = strlen(small);
        CHECK(s == GM_OK && again == n && cut < sizeof small && cut <= n);
        CHECK(memcmp(small, lines, cut) == 0);
        CHECK(cut == n || ((unsigned char)lines[cut] & 0xC0) != 0x80);
        free(lines);
        CHECK(gm_world_warnings(NULL, 1, &n, world, &err) == GM_ERROR_INVALID_ARGUMENT);
        CHECK(gm_world_warnings(NULL, 0, &n, NULL, &err) == GM_ERROR_INVALID_ARGUMENT);
    }
    {
        gm_bake_options opt;
        gm_world_info wi;
        gm_world_get_info(&wi, world, NULL);
        gm_bake_options_init(&opt);
        opt.threads = threads;
        opt.max_triangles = wi.max_triangles < max_triangles ? wi.max_triangles : max_triangles;
        s = gm_bake_create(&bake, world, &opt, &err);
        check_error(s, &err);
        if (s == GM_OK) {
            /* an edit session: an update with the same world changes nothing */
            gm_edit* edit = NULL;
            uint64_t changed = 99;
            gm_status es = gm_edit_create(&edit, world, &opt, &err);
            check_error(es, &err);
            CHECK(es == GM_OK && edit != NULL && gm_edit_bake(edit) != NULL);
            es = gm_edit_update(edit, world, &err);
            check_error(es, &err);
            CHECK(es == GM_OK);
            es = gm_edit_changed_count(&changed, edit, &err);
            CHECK(es == GM_OK && changed == 0);
            CHECK(gm_edit_update(NULL, world, &err) == GM_ERROR_INVALID_ARGUMENT);
            gm_edit_destroy(edit);
        }
    }
    gm_world_destroy(world); /* a bake does not refer to its world */
    if (s != GM_OK) {
        CHECK(bake == NULL);
        /* refused: over budget, bad input, or a level or the collider measured beyond its
         * tolerance (GM_ERROR_TOLERANCE, documented in globemill.h) */
        CHECK(s == GM_ERROR_BUDGET || s == GM_ERROR_INVALID_ARGUMENT || s == GM_ERROR_TOLERANCE);
        free(buf_f64);
        return (int)s;
    }
    {
        gm_bake_info bi;
        uint32_t level, chunk, mask;
        uint64_t V;
        s = gm_bake_get_info(&bi, bake, &err);
        check_error(s, &err);
        CHECK(s == GM_OK && bi.level_count >= 1 && bi.chunk_count >= 20);
        V = bi.vertex_count;
        COPY(f64, 3 * V, gm_bake_vertex_data(dst_, cap_, bake, GM_VERTEX_POSITION, &err));
        COPY(f64, 3 * V, gm_bake_vertex_data(dst_, cap_, bake, GM_VERTEX_NORMAL, &err));
        COPY(f64, V, gm_bake_vertex_data(dst_, cap_, bake, GM_VERTEX_SLOPE, &err));
        CHECK(gm_bake_vertex_data(buf_f64, 3 * V, bake, GM_VERTEX_MORPH, &err) == GM_ERROR_INVALID_ARGUMENT);
        CHECK(gm_bake_vertex_data(buf_f64, 3 * V, bake, 99, &err) == GM_ERROR_INVALID_ARGUMENT);
        {
            u8 one;
            gm_status ls = gm_bake_vertex_layers(V ? NULL : &one, 0, bake, &err);
            CHECK(ls == GM_ERROR_BUFFER_TOO_SMALL || ls == GM_ERROR_INVALID_ARGUMENT);
            if (ls == GM_ERROR_BUFFER_TOO_SMALL)
                COPY(u8, V, gm_bake_vertex_layers(dst_, cap_, bake, &err));
        }
        for (level = 0; level < bi.level_count; ++level) {
            gm_level_info li;
            uint64_t t;
            s = gm_bake_level_info(&li, bake, level, &err);
            check_error(s, &err);
            CHECK(s == GM_OK && li.vertex_count <= V && li.tolerance_m > 0);
            COPY(u32, 3 * li.triangle_count, gm_bake_level_triangles(dst_, cap_, bake, level, &err));
            for (t = 0; t < 3 * li.triangle_count; ++t) CHECK(buf_u32[t] < V);
            COPY(u32, li.triangle_count, gm_bake_level_triangle_chunks(dst_, cap_, bake, level, &err));
            for (t = 0; t < li.triangle_count; ++t) CHECK(buf_u32[t] < bi.chunk_count);
            COPY(f32, li.triangle_count, gm_bake_level_errors(dst_, cap_, bake, level, &err));
            COPY(f64, 3 * V, gm_bake_level_morph(dst_, cap_, bake, level, &err));
            COPY(u8, V, gm_bake_level_present(dst_, cap_, bake, level, &err));
            /* chunks: at most a few per level keep the fuzzer fast */
            for (chunk = 0; chunk < bi.chunk_count; chunk += 1 + bi.chunk_count / 8) {
                gm_chunk_info ci;
                uint64_t k;
                s = gm_chunk_get_info(&ci, bake, level, chunk, &err);
                check_error(s, &err);
                CHECK(s == GM_OK && ci.interior_count <= ci.triangle_count);
                CHECK(ci.surface_vertex_count <= ci.vertex_count);
                COPY(u32, ci.surface_vertex_count, gm_chunk_vertex_ids(dst_, cap_, bake, level, chunk, &err));
                for (k = 0; k < ci.surface_vertex_count; ++k) CHECK(buf_u32[k] < V);
                COPY(f64, 3 * ci.vertex_count, gm_chunk_vertex_data(dst_, cap_, bake, level, chunk, GM_VERTEX_MORPH, &err));
                COPY(f64, 3 * ci.vertex_count, gm_chunk_vertex_data(dst_, cap_, bake, level, chunk, GM_VERTEX_POSITION, &err));
                COPY(f64, ci.vertex_count, gm_chunk_vertex_data(dst_, cap_, bake, level, chunk, GM_VERTEX_ALTITUDE, &err));
                COPY(u32, 3 * ci.triangle_count, gm_chunk_triangles(dst_, cap_, bake, level, chunk, &err));
                for (k = 0; k < 3 * ci.triangle_count; ++k) CHECK(buf_u32[k] < ci.surface_vertex_count);
                for (mask = 1; mask < 8; ++mask) {
                    COPY(u32, 3 * ci.stitched_triangle_count[mask],
                         gm_chunk_stitched(dst_, cap_, bake, level, chunk, mask, &err));
                    for (k = 0; k < 3 * ci.stitched_triangle_count[mask]; ++k)
                        CHECK(buf_u32[k] < ci.surface_vertex_count);
                }
                CHECK(gm_chunk_stitched(buf_u32, 0, bake, level, chunk, 8, &err) == GM_ERROR_INVALID_ARGUMENT);
                COPY(u32, 3 * ci.skirt_triangle_count, gm_chunk_skirt(dst_, cap_, bake, level, chunk, &err));
                for (k = 0; k < 3 * ci.skirt_triangle_count; ++k) CHECK(buf_u32[k] < ci.vertex_count);
                for (k = 0; k < 3; ++k) CHECK(ci.neighbors[k] < bi.chunk_count && ci.corners[k] < V);
            }
            CHECK(gm_chunk_get_info(NULL, bake, level, 0, &err) == GM_ERROR_INVALID_ARGUMENT);
        }
        CHECK(gm_bake_level_triangles(buf_u32, 0, bake, bi.level_count, &err) == GM_ERROR_INVALID_ARGUMENT);
        check_error(GM_ERROR_INVALID_ARGUMENT, &err);
        if (bi.has_colliders) {
            uint64_t total = 0;
            for (chunk = 0; chunk < bi.chunk_count; ++chunk) {
                uint64_t nv = 0, nt = 0, k;
                s = gm_collider_counts(&nv, &nt, bake, chunk, &err);
                check_error(s, &err);
                CHECK(s == GM_OK);
                total += nt;
                if (chunk % (1 + bi.chunk_count / 8)) continue;
                COPY(f64, 3 * nv, gm_collider_positions(dst_, cap_, bake, chunk, &err));
                COPY(u32, 3 * nt, gm_collider_triangles(dst_, cap_, bake, chunk, &err));
                for (k = 0; k < 3 * nt; ++k) CHECK(buf_u32[k] < nv);
            }
            CHECK(total == bi.collision_triangles);
        }
    }
    gm_bake_destroy(bake);
    free(buf_f64);
    free(buf_f32);
    free(buf_u32);
    free(buf_u8);
    return 0;
}
