package mesh

import "math"

// AngleDeficits returns the discrete Gaussian curvature of the mesh per
// vertex, integrated over the vertex's share of the surface: the angle
// deficit 2π − Σ (interior angles of the triangles at the vertex), the
// usual discrete Gaussian curvature of a triangle mesh (Meyer, Desbrun,
// Schröder & Barr 2003, Visualization and Mathematics III, §4; the
// polyhedral Gauss–Bonnet theorem of Descartes). Over a closed mesh the
// deficits sum to 2π·(V − E + F), the discrete Gauss–Bonnet theorem; over
// part of a smooth surface, Σ deficit / Σ VertexAreas approaches the mean
// Gaussian curvature K = k1·k2 of that part. Vertices of an open mesh's
// border get 2π minus their angles too, which is not a curvature there.
func (m *Mesh) AngleDeficits() []float64 {
	d := make([]float64, len(m.Vertices))
	for i := range d {
		d[i] = 2 * math.Pi
	}
	for _, t := range m.Triangles {
		p := [3][3]float64{m.Vertices[t[0]], m.Vertices[t[1]], m.Vertices[t[2]]}
		for k := 0; k < 3; k++ {
			a, b := sub(p[(k+1)%3], p[k]), sub(p[(k+2)%3], p[k])
			na, nb := math.Sqrt(dot(a, a)), math.Sqrt(dot(b, b))
			if na == 0 || nb == 0 {
				continue
			}
			c := dot(a, b) / (na * nb)
			d[t[k]] -= math.Acos(math.Max(-1, math.Min(1, c)))
		}
	}
	return d
}

// VertexAreas returns each vertex's share of the surface: a third of the
// area of every triangle it belongs to (the barycentric cells of Meyer et
// al. 2003). They sum to Area.
func (m *Mesh) VertexAreas() []float64 {
	a := make([]float64, len(m.Vertices))
	for _, t := range m.Triangles {
		s := triArea([3][3]float64{m.Vertices[t[0]], m.Vertices[t[1]], m.Vertices[t[2]]}) / 3
		for _, v := range t {
			a[v] += s
		}
	}
	return a
}
