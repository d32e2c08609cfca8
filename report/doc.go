// Package report writes the outcome of one voxgamma comparison for its two
// readers: a check pipeline, which reads the JSON document (and perhaps the
// CSV table), and a medical physicist, who reviews a single self-contained
// HTML page before signing off.
//
// Every number in every output comes from a [result.Result], the one source
// of truth; the HTML page adds figures computed from the grids the result was
// made from (the reference dose and the Γ grid), and refuses grids that do not
// agree with the result (an overall Γ histogram whose count differs from
// Result.Overall.Evaluated means the grid and the result are from different
// runs).
//
// # Outputs
//
//   - [WriteJSON] / [EncodeJSON]: the result as indented JSON. Equal results
//     give identical bytes.
//   - [WriteCSV] / [EncodeCSV]: one row for the overall statistics, then one
//     row per ROI; null numbers are empty cells.
//   - [WriteHTML] / [RenderHTML]: the review page, one file that opens
//     offline in any browser. It fetches nothing: figures are inline SVG
//     (drawn with gonum.org/v1/plot), raster slices are data: PNG inside the
//     SVG, styles and the few lines of script are inline, and a
//     Content-Security-Policy forbids any other source. The script only
//     switches which ROI's figures are shown; with scripts disabled every
//     figure is shown.
//
// Files are written atomically (see internal/atomicfile): a reader never sees
// a half-written report.
//
// # Page conventions
//
// Slices are shown in patient orientation whatever the grid's index order or
// axis directions, in the DICOM patient coordinate system (x towards the
// patient's left, y posterior, z superior) and the usual radiological display:
// axial slices seen from the feet (patient right on the image's left,
// anterior at the top), coronal slices seen from the front (patient right on
// the left, superior at the top), sagittal slices seen from the patient's left
// (anterior on the left, superior at the top). Letters at the image edges name
// the patient directions.
//
// Met and not-met rules, pass and fail are always marked by a word and a
// symbol as well as by colour.
package report
