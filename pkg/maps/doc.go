// Package maps draws result maps and plots: colour maps, field overlays on
// the reference or deformed image with a colour bar and a scale bar,
// displacement vector plots, and curve plots (gonum/plot), all as
// deterministic images or PNG bytes.
//
// The package takes plain inputs (grid positions and values as slices, a
// grey image from pkg/imageio) so that it does not depend on how the values
// were computed.
//
// Colour maps are published, perceptually uniform and colour-vision-deficiency
// friendly: viridis (van der Walt & Smith 2015) and cividis (Nuñez, Anderton &
// Renslow 2018) for magnitudes, and Moreland's cool–warm diverging map
// (Moreland 2009), computed from its published construction in Msh space,
// for signed quantities centred on zero.
//
// Maps are pictures for reading a result, not the result itself: read
// numbers from the data files, and state the measurement uncertainty with
// any value taken from a map.
package maps

//go:generate sh -c "/usr/bin/python3 gen_tables.py > tables.go && gofmt -w tables.go"
