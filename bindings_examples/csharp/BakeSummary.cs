// A C# host of globemill through P/Invoke: bake a world from its JSON spec, copy every chunk of
// every level into managed arrays (as an engine would before uploading them) and print the same
// summary lines as the C example (and the same "warning: " lines on stderr).
//   mono BakeSummary.exe SPEC.json [TOLERANCE_M]
using System;
using System.Globalization;
using System.IO;
using Globemill;

static class BakeSummary
{
    static UIntPtr N(ulong n) { return new UIntPtr(n); }

    static string G(double x) { return x.ToString("R", CultureInfo.InvariantCulture); }

    static int Main(string[] args)
    {
        if (args.Length < 1 || args.Length > 2)
        {
            Console.Error.WriteLine("usage: BakeSummary.exe SPEC.json [TOLERANCE_M]");
            return 2;
        }
        var err = new Error();
        byte[] text = File.ReadAllBytes(args[0]);
        IntPtr world, bake = IntPtr.Zero;
        try
        {
            Check.Ok(Native.gm_world_create(out world, text, N((ulong)text.Length), ref err), err);
        }
        catch (GlobemillException e)
        {
            Console.Error.WriteLine("gm_world_create failed ({0}): {1}", e.Status, e.Message);
            return 1;
        }
        try
        {
            foreach (string line in World.Warnings(world)) Console.Error.WriteLine("warning: " + line);
            WorldInfo wi;
            Check.Ok(Native.gm_world_get_info(out wi, world, ref err), err);
            BakeOptions opt;
            Native.gm_bake_options_init(out opt);
            if (args.Length == 2) opt.ToleranceM = double.Parse(args[1], CultureInfo.InvariantCulture);
            Check.Ok(Native.gm_bake_create(out bake, world, ref opt, ref err), err);
            BakeInfo bi;
            Check.Ok(Native.gm_bake_get_info(out bi, bake, ref err), err);

            string version = System.Runtime.InteropServices.Marshal.PtrToStringAnsi(Native.gm_version_string());
            Console.WriteLine("globemill " + version);
            Console.WriteLine("world {0} radius_m {1} features {2}", wi.Name, G(wi.RadiusM), wi.FeatureCount);
            Console.WriteLine("pool_vertices {0} chunks {1} levels {2}", bi.VertexCount, bi.ChunkCount, bi.LevelCount);
            for (uint level = 0; level < bi.LevelCount; ++level)
            {
                LevelInfo li;
                Check.Ok(Native.gm_bake_level_info(out li, bake, level, ref err), err);
                ulong chunkVertices = 0, chunkTriangles = 0, stitched = 0;
                for (uint chunk = 0; chunk < bi.ChunkCount; ++chunk)
                {
                    ChunkInfo ci;
                    Check.Ok(Native.gm_chunk_get_info(out ci, bake, level, chunk, ref err), err);
                    var pos = new double[3 * ci.VertexCount];
                    var nrm = new double[3 * ci.VertexCount];
                    var morph = new double[3 * ci.VertexCount];
                    var tris = new uint[3 * ci.TriangleCount];
                    Check.Ok(Native.gm_chunk_vertex_data(pos, N((ulong)pos.Length), bake, level, chunk, VertexData.Position, ref err), err);
                    Check.Ok(Native.gm_chunk_vertex_data(nrm, N((ulong)nrm.Length), bake, level, chunk, VertexData.Normal, ref err), err);
                    Check.Ok(Native.gm_chunk_vertex_data(morph, N((ulong)morph.Length), bake, level, chunk, VertexData.Morph, ref err), err);
                    Check.Ok(Native.gm_chunk_triangles(tris, N((ulong)tris.Length), bake, level, chunk, ref err), err);
                    chunkVertices += ci.VertexCount;
                    chunkTriangles += ci.TriangleCount;
                    for (int mask = 1; mask < 8; ++mask) stitched += ci.StitchedTriangleCount[mask];
                }
                Console.WriteLine(
                    "level {0} tolerance_m {1} vertices {2} triangles {3} chunk_vertices {4} chunk_triangles {5} stitched_triangles {6} max_error_m {7}",
                    level, G(li.ToleranceM), li.VertexCount, li.TriangleCount, chunkVertices, chunkTriangles, stitched,
                    li.MaxErrorM.ToString("G6", CultureInfo.InvariantCulture));
            }
            if (bi.HasColliders != 0)
            {
                ulong vertices = 0;
                for (uint chunk = 0; chunk < bi.ChunkCount; ++chunk)
                {
                    ulong nv, nt;
                    Check.Ok(Native.gm_collider_counts(out nv, out nt, bake, chunk, ref err), err);
                    vertices += nv;
                }
                Console.WriteLine("colliders vertices {0} triangles {1} max_per_chunk {2} tolerance_m {3} max_error_m {4}",
                    vertices, bi.CollisionTriangles, bi.CollisionMaxTrianglesPerChunk, G(bi.CollisionToleranceM),
                    bi.CollisionMaxErrorM.ToString("G6", CultureInfo.InvariantCulture));
            }
            return 0;
        }
        catch (GlobemillException e)
        {
            Console.Error.WriteLine("globemill failed ({0}): {1}", e.Status, e.Message);
            return 1;
        }
        finally
        {
            Native.gm_bake_destroy(bake);
            Native.gm_world_destroy(world);
        }
    }
}
