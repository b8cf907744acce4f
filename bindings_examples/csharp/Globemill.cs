// P/Invoke declarations of globemill's C ABI (csrc/include/globemill.h). Structs mirror the header
// field for field (sequential layout, natural alignment); buffers are caller-owned arrays pinned by
// the marshaller for the duration of each call.
using System;
using System.Runtime.InteropServices;
using System.Text;

namespace Globemill
{
    public enum Status
    {
        Ok = 0,
        InvalidArgument = 1,
        Parse = 2,
        Spec = 3,
        Budget = 4,
        BufferTooSmall = 5,
        OutOfMemory = 6,
        Internal = 7,
    }

    public enum VertexData
    {
        Position = 0,
        Direction = 1,
        Normal = 2,
        Morph = 3,
        Slope = 4,
        Altitude = 5,
        Color = 6,
    }

    [StructLayout(LayoutKind.Sequential)]
    public struct Error
    {
        public int Status;
        public int Truncated;
        [MarshalAs(UnmanagedType.ByValArray, SizeConst = 1024)]
        public byte[] MessageBytes;

        // the message is UTF-8 up to its NUL
        public string Message
        {
            get
            {
                if (MessageBytes == null) return "";
                int n = Array.IndexOf(MessageBytes, (byte)0);
                return Encoding.UTF8.GetString(MessageBytes, 0, n < 0 ? MessageBytes.Length : n);
            }
        }
    }

    [StructLayout(LayoutKind.Sequential)]
    public struct WorldInfo
    {
        public double RadiusM, ToleranceM, Ratio, SkirtDepthM, CollisionToleranceM;
        public ulong MaxTriangles;
        public uint FeatureCount, LayerCount, Levels, ChunkLevel, ChunkCount, CollisionMaxTrianglesPerChunk;
        public int Offset, Seams, CollisionBias, Reserved;
        [MarshalAs(UnmanagedType.ByValArray, SizeConst = 72)]
        public byte[] NameBytes;

        public string Name
        {
            get
            {
                int n = Array.IndexOf(NameBytes, (byte)0);
                return Encoding.ASCII.GetString(NameBytes, 0, n < 0 ? NameBytes.Length : n);
            }
        }
    }

    [UnmanagedFunctionPointer(CallingConvention.Cdecl)]
    public delegate void ProgressFn(IntPtr user, int round, ulong triangles);

    [StructLayout(LayoutKind.Sequential)]
    public struct BakeOptions
    {
        public uint StructSize;
        public int Threads;
        public double ToleranceM;
        public double Ratio;
        public int Levels;
        public int ChunkLevel;
        public int Offset;
        public int Collision;
        public ulong MaxTriangles;
        public IntPtr Progress;      // a ProgressFn from Marshal.GetFunctionPointerForDelegate, or zero
        public IntPtr ProgressUser;
        public int AcceptOverTolerance; // 1: keep a bake measured beyond a tolerance
    }

    [StructLayout(LayoutKind.Sequential)]
    public struct BakeInfo
    {
        public ulong VertexCount;
        public uint LevelCount, ChunkCount;
        public int Seams, HasColliders;
        public double SkirtDepthM, CollisionToleranceM, CollisionMaxErrorM;
        public ulong CollisionTriangles, CollisionMaxTrianglesPerChunk;
    }

    [StructLayout(LayoutKind.Sequential)]
    public struct LevelInfo
    {
        public double ToleranceM, MaxErrorM, MeshToSurfaceM, SurfaceToMeshM;
        public ulong VertexCount, TriangleCount, Repaired, StitchFailures;
    }

    [StructLayout(LayoutKind.Sequential)]
    public struct ChunkInfo
    {
        public ulong VertexCount, SurfaceVertexCount, TriangleCount, InteriorCount, SkirtTriangleCount;
        [MarshalAs(UnmanagedType.ByValArray, SizeConst = 8)]
        public ulong[] StitchedTriangleCount;
        [MarshalAs(UnmanagedType.ByValArray, SizeConst = 3)]
        public uint[] Neighbors;
        [MarshalAs(UnmanagedType.ByValArray, SizeConst = 3)]
        public uint[] Corners;
    }

    public static class Native
    {
        const string Lib = "globemill"; // libglobemill.so / globemill.dll, found on the library path

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern uint gm_version();

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern IntPtr gm_version_string();

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_world_create(out IntPtr world, byte[] specJson, UIntPtr specLength, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern void gm_world_destroy(IntPtr world);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_world_warnings(byte[] text, UIntPtr textCapacity, out UIntPtr textLength, IntPtr world, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_world_get_info(out WorldInfo info, IntPtr world, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern void gm_bake_options_init(out BakeOptions options);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_bake_create(out IntPtr bake, IntPtr world, ref BakeOptions options, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern void gm_bake_destroy(IntPtr bake);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_bake_get_info(out BakeInfo info, IntPtr bake, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_bake_level_info(out LevelInfo info, IntPtr bake, uint level, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_bake_vertex_data(double[] dst, UIntPtr capacity, IntPtr bake, VertexData which, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_bake_level_triangles(uint[] dst, UIntPtr capacity, IntPtr bake, uint level, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_chunk_get_info(out ChunkInfo info, IntPtr bake, uint level, uint chunk, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_chunk_vertex_data(double[] dst, UIntPtr capacity, IntPtr bake, uint level, uint chunk, VertexData which, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_chunk_triangles(uint[] dst, UIntPtr capacity, IntPtr bake, uint level, uint chunk, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_chunk_stitched(uint[] dst, UIntPtr capacity, IntPtr bake, uint level, uint chunk, uint mask, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_collider_counts(out ulong vertexCount, out ulong triangleCount, IntPtr bake, uint chunk, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_collider_positions(double[] dst, UIntPtr capacity, IntPtr bake, uint chunk, ref Error err);

        [DllImport(Lib, CallingConvention = CallingConvention.Cdecl)]
        public static extern Status gm_collider_triangles(uint[] dst, UIntPtr capacity, IntPtr bake, uint chunk, ref Error err);
    }

    public static class World
    {
        // The deprecation messages of a world's spec (gm_world_warnings), one per line; none
        // when it uses no renamed key.
        public static string[] Warnings(IntPtr world)
        {
            var err = new Error();
            UIntPtr length;
            Check.Ok(Native.gm_world_warnings(null, UIntPtr.Zero, out length, world, ref err), err);
            if (length.ToUInt64() == 0) return new string[0];
            var text = new byte[length.ToUInt64() + 1];
            Check.Ok(Native.gm_world_warnings(text, new UIntPtr((ulong)text.Length), out length, world, ref err), err);
            return System.Text.Encoding.UTF8.GetString(text, 0, (int)length.ToUInt64()).Split('\n');
        }
    }

    public class GlobemillException : Exception
    {
        public Status Status { get; }
        public GlobemillException(Status status, string message) : base(message) { Status = status; }
    }

    public static class Check
    {
        public static void Ok(Status s, Error err)
        {
            if (s != Status.Ok) throw new GlobemillException(s, err.Message);
        }
    }
}
