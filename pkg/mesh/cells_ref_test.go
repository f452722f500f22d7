package mesh

// The cell-by-cell marching cubes walk that the bit-mask walk replaced,
// kept as the reference the new one must equal triangle for triangle.

import "sluice/pkg/volume"

// walkCells calls fn for every triangle of the iso-surface in the given cubes,
// with the global edge keys and the vertex positions.
func walkCells(f *volume.Volume[float32], level float64, cubes volume.Box, fn func(key [3]int64, p [3][3]float64)) {
	tab := table()
	cb := cubeBox(f, cubes)
	if cb.Empty() {
		return
	}
	s := f.Box.Size()
	sy, sz := s[2], s[1]*s[2]
	var off [8]int
	for b := 0; b < 8; b++ {
		off[b] = (b>>2&1)*sz + (b>>1&1)*sy + (b & 1)
	}
	lv := float32(level)
	var val [8]float32
	for z := cb.Min[0]; z < cb.Max[0]; z++ {
		for y := cb.Min[1]; y < cb.Max[1]; y++ {
			i0 := f.Index(z, y, cb.Min[2])
			for x := cb.Min[2]; x < cb.Max[2]; x++ {
				i := i0 + x - cb.Min[2]
				c := 0
				for b := 0; b < 8; b++ {
					val[b] = f.Pix[i+off[b]]
					if val[b] > lv {
						c |= 1 << b
					}
				}
				if c == 0 || c == 255 {
					continue
				}
				o := [3]float64{float64(z), float64(y), float64(x)}
				for li, loop := range tab[c] {
					var keys [12]int64
					var pts [12][3]float64
					var mean [3]float64
					for k, e := range loop {
						a, b := edges[e][0], edges[e][1]
						t := (level - float64(val[a])) / (float64(val[b]) - float64(val[a]))
						ca, cbn := corner(a), corner(b)
						for j := 0; j < 3; j++ {
							pts[k][j] = o[j] + ca[j] + t*(cbn[j]-ca[j])
							mean[j] += pts[k][j] / float64(len(loop))
						}
						// Edge key: 3 × global sample index of the low end + axis.
						ax := 0
						for (a^b)>>ax != 1 {
							ax++
						}
						keys[k] = int64(i+off[a])*3 + int64(ax)
					}
					if len(loop) == 3 {
						fn([3]int64{keys[0], keys[1], keys[2]}, [3][3]float64{pts[0], pts[1], pts[2]})
						continue
					}
					// Fan around the loop's centroid, keyed −(8·cube + loop) − 1.
					ck := -int64(i)*8 - int64(li) - 1
					for k := range loop {
						k2 := (k + 1) % len(loop)
						fn([3]int64{ck, keys[k], keys[k2]}, [3][3]float64{mean, pts[k], pts[k2]})
					}
				}
			}
		}
	}
}
