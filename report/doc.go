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
//     SVG, styles are inline, the one script (viewer.js) is allowed by its
//     SHA-256 hash in a Content-Security-Policy that forbids any other
//     source, and the slice browser's volumes are zlib-compressed data
//     blocks (see viewer.go for their encoding and when they are
//     downsampled). The script shows one ROI's figures at a time (the
//     worst ROI's first) and runs the slice browser: three orthogonal views
//     stepping through every slice, zoom, pan, and overlays of the
//     reference dose, isodoses, ROI outlines, Γ and the dose difference.
//     With scripts disabled every figure shows, with fixed slices through
//     the largest failing region.
//   - [WritePDF] / [RenderPDF]: the same review as a paginated A4 PDF for
//     the archive (codeberg.org/go-pdf/fpdf, Liberation fonts embedded),
//     with slices through each failing region and each target and a
//     sign-off block.
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
// Met, not-met and not-applicable rules, pass and fail are always marked
// by a word (and on the page a symbol) as well as by colour. Failures lead:
// rules not met first, then the ROIs with a rule not met (action level
// before tolerance, then the lowest pass rate). ROIs are coloured with
// Kelly's colours of maximum contrast (palette.go), Γ, the dose difference
// and the dose wash with ColorBrewer scales. A derived ROI with the numbers
// of a structure-set ROI (the derived "body" of one BODY) shares its row.
// Person names are shown "Family, Given"; file paths break only at
// separators.
//
// The headless-browser checks of its tests live in internal/browsercheck,
// a test tool rather than part of what the package offers: a static check
// of a page (figures, console, requests, with and without scripts) and a
// Session that drives a page over the DevTools protocol.
package report
