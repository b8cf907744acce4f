/* A C host of globemill: bake a world from its JSON spec through the C ABI, pull every chunk of
 * every level into buffers of its own (as an engine would before uploading them), and print a
 * short summary.
 *
 *   globemill_bake_summary SPEC.json [TOLERANCE_M]
 *
 * TOLERANCE_M, when given, replaces the finest level's tolerance (like globemill.bake's
 * tolerance_m). The spec's deprecation messages (keys written in an old spelling) go to stderr,
 * one "warning: " line each. Exit status 0 on success, 1 with the library's message on stderr
 * otherwise. */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>

#include "globemill.h"

static char* read_file(const char* path, size_t* size) {
    FILE* f = fopen(path, "rb");
    char* data = NULL;
    long n;
    if (!f) return NULL;
    if (fseek(f, 0, SEEK_END) == 0 && (n = ftell(f)) >= 0 && fseek(f, 0, SEEK_SET) == 0) {
        data = (char*)malloc((size_t)n + 1);
        if (data && fread(data, 1, (size_t)n, f) == (size_t)n) {
            *size = (size_t)n;
        } else {
            free(data);
            data = NULL;
        }
    }
    fclose(f);
    return data;
}

/* the spec's deprecation messages (renamed keys), each as "warning: <line>" on stderr */
static void print_warnings(const gm_world* world) {
    size_t n = 0;
    char* lines;
    char* line;
    if (gm_world_warnings(NULL, 0, &n, world, NULL) != GM_OK || n == 0) return;
    lines = (char*)malloc(n + 1);
    if (!lines || gm_world_warnings(lines, n + 1, &n, world, NULL) != GM_OK) {
        free(lines);
        return;
    }
    for (line = strtok(lines, "\n"); line; line = strtok(NULL, "\n"))
        fprintf(stderr, "warning: %s\n", line);
    free(lines);
}

static int report(const char* what, const gm_error* err) {
    fprintf(stderr, "%s failed (%s): %s\n", what, gm_status_name(err->status), err->message);
    return 1;
}

int main(int argc, char** argv) {
    gm_error err;
    gm_world* world = NULL;
    gm_bake* bake = NULL;
    gm_world_info wi;
    gm_bake_info bi;
    gm_bake_options opt;
    size_t size = 0;
    char* text;
    uint32_t level, chunk;
    int rc = 1;

    if (argc < 2 || argc > 3) {
        fprintf(stderr, "usage: %s SPEC.json [TOLERANCE_M]\n", argv[0]);
        return 2;
    }
    /* the header this host was compiled with and the library it runs with must agree */
    if (gm_version() / 10000 != GM_VERSION_MAJOR) {
        fprintf(stderr, "libglobemill %s does not match globemill.h %s\n", gm_version_string(),
                GM_VERSION_STRING);
        return 1;
    }
    text = read_file(argv[1], &size);
    if (!text) {
        fprintf(stderr, "cannot read %s\n", argv[1]);
        return 1;
    }
    if (gm_world_create(&world, text, size, &err) != GM_OK) {
        free(text);
        return report("gm_world_create", &err);
    }
    free(text);
    print_warnings(world);
    gm_world_get_info(&wi, world, NULL);

    gm_bake_options_init(&opt);
    if (argc == 3) opt.tolerance_m = atof(argv[2]);
    if (gm_bake_create(&bake, world, &opt, &err) != GM_OK) {
        rc = report("gm_bake_create", &err);
        goto done;
    }
    gm_bake_get_info(&bi, bake, NULL);

    printf("globemill %s\n", gm_version_string());
    printf("world %s radius_m %.17g features %u\n", wi.name, wi.radius_m, wi.feature_count);
    printf("pool_vertices %llu chunks %u levels %u\n", (unsigned long long)bi.vertex_count,
           bi.chunk_count, bi.level_count);
    for (level = 0; level < bi.level_count; ++level) {
        gm_level_info li;
        unsigned long long chunk_vertices = 0, chunk_triangles = 0, stitched = 0;
        if (gm_bake_level_info(&li, bake, level, &err) != GM_OK) {
            rc = report("gm_bake_level_info", &err);
            goto done;
        }
        /* each chunk as its own mesh: positions, normals, morph targets and local triangles */
        for (chunk = 0; chunk < bi.chunk_count; ++chunk) {
            gm_chunk_info ci;
            double *pos, *nrm, *morph;
            uint32_t* tris;
            int mask, ok;
            if (gm_chunk_get_info(&ci, bake, level, chunk, &err) != GM_OK) {
                rc = report("gm_chunk_get_info", &err);
                goto done;
            }
            pos = (double*)malloc(3 * ci.vertex_count * sizeof(double) + 1);
            nrm = (double*)malloc(3 * ci.vertex_count * sizeof(double) + 1);
            morph = (double*)malloc(3 * ci.vertex_count * sizeof(double) + 1);
            tris = (uint32_t*)malloc(3 * ci.triangle_count * sizeof(uint32_t) + 1);
            ok = pos && nrm && morph && tris &&
                 gm_chunk_vertex_data(pos, 3 * ci.vertex_count, bake, level, chunk, GM_VERTEX_POSITION, &err) == GM_OK &&
                 gm_chunk_vertex_data(nrm, 3 * ci.vertex_count, bake, level, chunk, GM_VERTEX_NORMAL, &err) == GM_OK &&
                 gm_chunk_vertex_data(morph, 3 * ci.vertex_count, bake, level, chunk, GM_VERTEX_MORPH, &err) == GM_OK &&
                 gm_chunk_triangles(tris, 3 * ci.triangle_count, bake, level, chunk, &err) == GM_OK;
            /* an engine would upload the buffers here */
            free(pos);
            free(nrm);
            free(morph);
            free(tris);
            if (!ok) {
                rc = report("copying a chunk", &err);
                goto done;
            }
            chunk_vertices += ci.vertex_count;
            chunk_triangles += ci.triangle_count;
            for (mask = 1; mask < 8; ++mask) stitched += ci.stitched_triangle_count[mask];
        }
        printf("level %u tolerance_m %.17g vertices %llu triangles %llu chunk_vertices %llu "
               "chunk_triangles %llu stitched_triangles %llu max_error_m %.6g\n",
               level, li.tolerance_m, (unsigned long long)li.vertex_count,
               (unsigned long long)li.triangle_count, chunk_vertices, chunk_triangles, stitched,
               li.max_error_m);
    }
    if (bi.has_colliders) {
        unsigned long long vertices = 0;
        for (chunk = 0; chunk < bi.chunk_count; ++chunk) {
            uint64_t nv = 0;
            gm_collider_counts(&nv, NULL, bake, chunk, NULL);
            vertices += nv;
        }
        printf("colliders vertices %llu triangles %llu max_per_chunk %llu tolerance_m %.17g "
               "max_error_m %.6g\n",
               vertices, (unsigned long long)bi.collision_triangles,
               (unsigned long long)bi.collision_max_triangles_per_chunk, bi.collision_tolerance_m,
               bi.collision_max_error_m);
    }
    rc = 0;
done:
    gm_bake_destroy(bake);
    gm_world_destroy(world);
    return rc;
}
