// Package roi turns the ROIs of a structure set into sets of voxels of a dose
// grid and computes dose-volume statistics over them: the per-structure part
// of a voxgamma report (each target, each organ at risk).
//
// # Rasterisation
//
// A [Rasteriser] works on one [volume.Grid] whose frames (index axis k) run
// along patient z, in either sense; i and j then run along patient x and y
// (either way round, either sense). Any other grid is refused. All
// inside/outside decisions are made in patient coordinates, so head-first,
// feet-first, supine and prone grids covering the same space give the same
// voxels in space.
//
// Only CLOSED_PLANAR contours enclose a volume. POINT, OPEN_PLANAR and other
// contours, closed contours with fewer than 3 points and contours whose z
// varies by more than [PlaneTolerance] are not rasterised and are listed in
// [Region.Skipped]. An ROI with no contour at all gives an empty Region with
// [Region.NoContours] set. A non-finite coordinate is an error naming the ROI.
//
// Contours whose z agree within [PlaneTolerance] form one contour plane. All
// polygons of a plane are filled together by the even-odd rule (but see
// "Contours that overlap" below) (a point is
// inside when a ray from it crosses the polygons' edges an odd number of
// times; the rule of scan-conversion texts such as Foley, van Dam, Feiner and
// Hughes, Computer Graphics: Principles and Practice, 2nd ed. (1990), on
// filling polygons, and of PostScript's eofill): islands and
// holes come out right whatever the polygons' orientation (clockwise and
// counter-clockwise alike), and so do self-touching polygons and "keyhole"
// contours whose slit runs twice along the same edge. Filling is by
// scanline: for each row of sample points, the crossings of the row with the
// plane's edges are computed (an edge spans [y0, y1) so vertices count
// once), sorted, and the points between the first and second, third and
// fourth, ... crossing are inside; an active-edge list keeps each row's cost
// to the edges it meets.
//
// # Contours that overlap
//
// The even-odd rule gets islands and holes right, but it cancels the same
// contour written twice (an ROI exported twice over has no volume at all)
// and cuts the overlap out of two contours that partly overlap. Neither is
// what a contour means, so before filling, the polygons of a plane are
// compared pair by pair (those whose bounding boxes overlap) by the area of
// their intersection, I = (A + B − X)/2 with A and B their even-odd areas
// and X the even-odd area of both together:
//
//   - I = 0: apart (or touching along an edge): nothing to do;
//   - I = min(A, B) < max(A, B): one lies inside the other, an island and
//     its hole: the even-odd rule, as before;
//   - I = A = B: the same contour twice (whatever its vertices, start or
//     orientation): counted once;
//   - otherwise they partly overlap: filled as their union.
//
// Equal means within a millionth of the larger area. Polygons joined this
// way (and any joined to them in turn) form a group; each polygon is filled
// by the even-odd rule, a group is the union of its polygons, and the
// groups are combined by the even-odd rule, so a hole drawn twice is still
// one hole. Planes where this happened are listed in [Region.Overlaps] and
// said in [Region.Notes] ([Region.OverlapSummary]); the caller warns. Planes
// without such pairs are filled exactly as before.
//
// # Contour planes and dose frames (the z rule)
//
// Contour planes need not coincide with dose frames. A contour plane at z_p
// stands for the slab [z_p − h⁻, z_p + h⁺) of patient z, where h⁻ and h⁺ are
// half the distances to the neighbouring contour planes: every z between two
// planes belongs to the nearer one. The ends:
//
//   - The first and last plane extend beyond themselves by as much as on
//     their inner side (half the spacing to their one neighbour), so an ROI
//     contoured on planes s apart reaches s/2 beyond its first and last
//     planes, as the slab model of planning systems has it. Anything beyond
//     that is outside.
//   - A gap between consecutive planes larger than [GapFactor] (1.5) times
//     each of the neighbouring gaps is where the ROI is absent (a structure
//     in two parts along z, or a skipped slice): the planes on either side
//     of it extend into it only as they would at an end.
//   - A plane with such a gap on both sides (no contiguous neighbour) extends
//     by half the ROI's median plane spacing on both sides.
//   - A single-plane ROI extends by half the thickness of the dose frame
//     nearest to its plane on either side (so it fills one frame's worth of
//     thickness).
//
// A frame centre or sub-slice whose z lies in no slab is outside the ROI.
//
// # Partial volume
//
// A voxel extends half-way to its neighbouring voxels along each axis (the
// first and last voxel of an axis as far beyond their centre as towards their
// one neighbour), so grids with non-uniform frame offsets have voxels of
// different thickness ([VoxelSize]); along a single-sample axis the
// thickness is [Options.SingleSampleThickness]. Each voxel is split into
// [Options.SubSlices] (default 4) equal sub-slices along z, and each
// sub-slice takes the contour plane whose slab holds its centre; within it,
// [Options.InPlane]² (default 4 × 4) sub-samples at the centres of equal
// sub-cells are tested against that plane's polygons. The voxel's fraction is
// the share of its sub-samples inside, in (0, 1]. Separately, a voxel's
// centre is inside when the frame's z lies in a plane's slab and the voxel's
// (x, y) centre is inside that plane's polygons: these voxels count toward
// the ROI's gamma pass rate ([Region.Centres], [Region.Mask]). Both are
// stored as runs of consecutive Data positions ([volume.Runs]), the
// fractions only where they are below 1 ([Cover]), with a bounding box: a
// body outline takes a few bytes per grid row it crosses and per surface
// voxel, not per voxel.
//
// The part of the ROI outside the grid's extent (the union of its voxels) is
// clipped; [Region.OutsideCC] measures it exactly as the contoured volume
// (each plane's even-odd area times its slab thickness, [Region.ContourCC])
// minus the same restricted to the grid's extent.
//
// # Kinds and derived regions
//
// [KindOfType] maps the RTROIInterpretedType (DICOM PS3.3) to [Target],
// [OAR], [Body] or [Other]; name [Rule]s (case-insensitive glob or prefix)
// apply when the type is empty, or always when they override ([Classify]).
// [AllTargets] and [BodyOf] unite the targets and the EXTERNAL ROIs;
// [Isodose] makes the region above a percentage of a normalisation dose.
//
// # Dose-volume metrics
//
// Definitions follow ICRU Report 83 (2010), "Prescribing, Recording, and
// Reporting Photon-Beam Intensity-Modulated Radiation Therapy (IMRT)":
// D_x is the minimum dose received by the hottest x of the volume (D98 % the
// near-minimum, D50 % the median, D2 % the near-maximum), and V_d the volume
// receiving at least d. Each voxel counts with its volume times its
// partial-volume fraction, and doses are the voxel-centre doses. A [DVH]
// sorts the voxels by decreasing dose once (O(n log n)) and keeps the
// cumulative volumes C_m of the m+1 hottest voxels. Then
//
//   - D_x = d_m for the smallest m with C_m ≥ x (x as a fraction of the total
//     volume, or an absolute volume; "≥" to within [RankTolerance] of the
//     total volume, so that rounding does not skip a voxel whose cumulative
//     volume is exactly x): the hottest voxels are taken whole until they
//     first reach x and D_x is the lowest dose among them. There is no
//     interpolation between voxels; D_x is one of the voxel doses, and a
//     finer grid or more sub-samples, not interpolation, is the way to resolve
//     it further.
//   - V_d = the total volume of the voxels with dose ≥ d.
//   - Dmean is the volume-weighted mean, Dmax and Dmin the largest and
//     smallest dose of a voxel with volume > 0.
//   - D0.03cc (a near-maximum quoted in common practice; no published
//     definition is cited) is D_x for x = 0.03 cm³.
//
// [RegionSummary] gives the same metrics and curve for a rasterised region
// without holding its voxels sorted: a radix selection on the doses'
// float32 bits, in two passes over the region and a few megabytes, for
// body outlines of millions of voxels.
//
// Differences between an evaluated and a reference dose are evaluated −
// reference, in Gy (cm³ for volumes) and in percent of the normalisation
// dose when one is given, else of the reference value; V_d differences are
// in percent of the reference region volume ([CompareMetrics]).
package roi
