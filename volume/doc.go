// Package volume holds 3D dose grids placed in DICOM patient coordinates, the
// sampling of such grids at arbitrary patient points, resampling from one grid
// onto another, and boolean masks over a grid.
//
// # Geometry
//
// A [Grid] has three index axes, i (columns), j (rows) and k (frames), in the
// order DICOM RT Dose stores its voxels. Each index axis points along one
// patient axis, positively or negatively: head-first and feet-first, supine
// and prone grids are all axis-aligned, only with flipped axes. Any other
// orientation (oblique, or not orthogonal) is refused by [New] with an error.
//
// The origin is the patient position (mm) of the centre of voxel (0, 0, 0).
// Sample positions along each axis are given as offsets in mm from the origin
// along that axis's direction; they must be strictly monotonic and need not be
// uniform (dose files often have irregular frame offsets). Offsets that
// decrease are accepted and normalised by flipping the axis direction, so a
// Grid's offsets always increase.
//
// # Local frame
//
// Because the orientation is a signed permutation of the patient axes, the map
// from patient coordinates to a grid's local frame (mm along i, j and k from
// the origin) is a rigid motion: distances are the same in both. The gamma
// engine therefore works in the evaluated grid's local frame.
//
// # Sampling
//
// [Grid.Sample] interpolates trilinearly between the eight voxel centres
// around a point. A point is inside when it lies within the box spanned by the
// first and last voxel centres along every axis (a tolerance of 1e-6 mm
// absorbs rounding); outside that box Sample reports ok = false rather than
// extrapolating. Along an axis with a single sample, only the plane of that
// sample is inside.
package volume
