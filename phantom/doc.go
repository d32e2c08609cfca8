// Package phantom builds invented, analytic test geometry for voxgamma: simple
// solids (sphere, cylinder along patient z, box) with exact volumes and inside
// tests, the planar contours a treatment planning system would write for them,
// structure.ROI values made from those contours, and dose grids filled from an
// analytic dose function of patient position.
//
// Nothing here is patient data: every shape and dose is made up, for tests and
// for the demo.
//
// # Conventions
//
// Coordinates are DICOM patient coordinates in mm. Volumes are in mm³.
//
// Contours are CLOSED_PLANAR polygons, one per axial plane (z = constant), as
// planning systems store them. Contour planes are chosen by [Planes]: the
// planes phase + n·spacing that fall within the shape's z extent (for the
// sphere strictly inside, since its tangent planes cut it in a single point).
// For the sphere and the cylinder the polygon is inscribed in the circle cut by
// the plane: its vertices lie on the circle, as a planning system puts contour
// vertices on the structure's boundary, so the polygon's area is a little
// smaller than the circle's (by the factor sin(2π/n)/(2π/n) for n vertices:
// 0.9984 at n = 64). The box's contour is its rectangle (four vertices).
// Polygons run counter-clockwise seen from +z.
//
// A polygon-contoured solid is not the solid: each polygon stands for a slab
// one plane spacing thick, so the contoured volume is a stack of slabs (see
// [SlabVolume]) and differs from the analytic volume by an amount that depends
// on the plane spacing and on where the planes fall. Tests that compare a
// rasterised volume with the analytic one must allow for this.
package phantom
