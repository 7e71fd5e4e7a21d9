// Package roi describes the region of interest of an analysis: a rectangle,
// a polygon with holes, or a mask image, rasterised to a per-pixel mask.
package roi

// Spec is the serialisable description of a region of interest in
// reference-image pixel coordinates. An empty Spec means the whole image.
// When several parts are given, the region is their intersection: the
// rectangle, intersected with the polygon, minus the holes.
type Spec struct {
	// Rect is x0, y0, x1, y1: the pixels x0 ≤ x < x1, y0 ≤ y < y1.
	Rect *[4]int `json:"rect,omitempty"`
	// Polygon is the outer boundary, as vertices (x, y) in order.
	Polygon [][2]float64 `json:"polygon,omitempty"`
	// Holes are polygons removed from the region.
	Holes [][][2]float64 `json:"holes,omitempty"`
}
