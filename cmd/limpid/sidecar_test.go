package main

import (
	"os"
	"os/exec"
	"path/filepath"
	"testing"
)

// Replacing an output removes the GDAL side-car (.aux.xml) an earlier file
// at that path left: GDAL reads a PAM side-car with whatever file holds the
// name (Source: GDAL raster data model, "PAM",
// https://gdal.org/user/raster_data_model.html; gdalinfo -stats writes
// one), so stale statistics would describe the new product.
func TestReplacedOutputLosesStaleSidecar(t *testing.T) {
	dir := t.TempDir()
	in, out := cropFixture(t, dir, 64), filepath.Join(dir, "out.tif")
	restore := func() {
		t.Helper()
		if code, _, stderr := limpid(t, nil, "restore", "--psf", "gaussian:sigma=1", "--smooth", "0", "--stop", "change", "--iterations", "3", in, out); code != 0 {
			t.Fatalf("exit %d: %s", code, stderr)
		}
	}
	restore()
	if err := exec.Command("gdalinfo", "-stats", out).Run(); err != nil {
		t.Fatal(err)
	}
	if _, err := os.Stat(out + ".aux.xml"); err != nil {
		t.Fatalf("gdalinfo -stats left no side-car to test with: %v", err)
	}
	restore()
	if _, err := os.Stat(out + ".aux.xml"); !os.IsNotExist(err) {
		t.Fatalf("the side-car of the replaced output is still there (%v)", err)
	}
}
