// Shared by three.html and babylon.html: the record every client reports for one file
// (benchmarks/clients/README.md) and small helpers to fill it.
export function newRecord() {
  return {
    visible: {},
    hidden: {},
    ranges: {},
    kept: { custom: [], uv_sets: 0, color: false, color_in_material: false, morph: 0, extras: false },
  };
}

export function levelOf(name) {
  const m = /lod(\d+)/.exec(name || "");
  return m ? m[1] : "-1";
}

export function count(rec, key, level, triangles) {
  if (key === "hidden") {
    rec.hidden[level] = (rec.hidden[level] || 0) + 1;
    return;
  }
  const lv = rec.visible[level] || { meshes: 0, triangles: 0 };
  lv.meshes += 1;
  lv.triangles += triangles;
  rec.visible[level] = lv;
}

// widen rec.ranges[key] by the components of `width`-wide items read by get(i, j)
export function widen(rec, key, n, width, get) {
  const lo = new Array(width).fill(Infinity);
  const hi = new Array(width).fill(-Infinity);
  for (let i = 0; i < n; i++) {
    for (let j = 0; j < width; j++) {
      const v = get(i, j);
      if (v < lo[j]) lo[j] = v;
      if (v > hi[j]) hi[j] = v;
    }
  }
  const old = rec.ranges[key];
  if (old) {
    for (let j = 0; j < width; j++) {
      lo[j] = Math.min(lo[j], old[0][j]);
      hi[j] = Math.max(hi[j], old[1][j]);
    }
  }
  rec.ranges[key] = [lo, hi];
}

export function keep(rec, name) {
  if (!rec.kept.custom.includes(name)) rec.kept.custom.push(name);
  rec.kept.custom.sort();
}

export const params = new URLSearchParams(location.search);
