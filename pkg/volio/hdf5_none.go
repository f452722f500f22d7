//go:build !hdf5 || !cgo

package volio

// HDF5Support reports whether this build reads HDF5 files (built with
// cgo, the HDF5 C library and the build tag hdf5; `make build` does that
// when pkg-config finds the library).
const HDF5Support = false

// openHDF5 refuses in one line and says how to get a build that reads the
// file.
func openHDF5(name string, _ Options) (Stream, error) {
	return nil, fileErr(name, ErrFormat, "HDF5 file, but this sluice was built without HDF5 support: install libhdf5-dev and pkg-config (Debian) and rebuild with `make build` (go build -tags hdf5)")
}
