// Package metaimage writes and reads 3D grids as single-file MetaImage
// (.mha) files, the format of the MetaIO library that ITK-based viewers and
// toolkits read: a text header of "Key = Value" lines followed by the raw
// samples.
//
// The files written here have
//
//	ObjectType = Image
//	NDims = 3
//	BinaryData = True
//	BinaryDataByteOrderMSB = False
//	CompressedData = False
//	TransformMatrix = (direction cosines of index axes i, j, k, one after the other)
//	Offset = (patient position of voxel (0,0,0), mm)
//	CenterOfRotation = 0 0 0
//	ElementSpacing = (spacing along i, j, k, mm)
//	DimSize = (samples along i, j, k)
//	ElementType = MET_FLOAT
//	ElementDataFile = LOCAL
//
// then the samples as little-endian IEEE 754 float32, i fastest, k slowest
// (the order of volume.Grid.Data). NaN samples (points not evaluated) stay
// NaN. Coordinates are DICOM patient coordinates (LPS), which is also what
// ITK assumes; TransformMatrix lists the direction of each index axis in
// turn, as ITK's MetaImage reader and writer do.
//
// MetaImage has one spacing per axis, so a grid with non-uniform offsets
// (irregular dose frames) cannot be written: [Write] returns an error and
// leaves resampling to the caller. Files are written atomically.
//
// [Read] reads back such files (uncompressed, little endian, MET_FLOAT,
// data in the same file), mainly for round-trip tests; it checks the
// dimensions against the file size before allocating.
package metaimage
