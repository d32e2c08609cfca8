// Package layering holds the test that keeps DEVELOPERS.md's data-flow
// picture true: each line there names a package and the voxgamma packages it
// imports, and the test compares them with the import graph `go list`
// reports (non-test imports), and checks that no package imports one
// listed above it. A new import or a new package fails the test until the
// picture says so. The package has no code of its own.
package layering
