//go:build unix

package onnx

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/fifotest"
)

// TestExternalDataLinkLeavingFolder: a symbolic link inside the model's
// folder that points out of it is refused when the weights are read, and
// the error says nothing of the outside file (not its size, not its path).
// A link that stays inside the folder is followed.
func TestExternalDataLinkLeavingFolder(t *testing.T) {
	root := t.TempDir()
	dir := filepath.Join(root, "models")
	if err := os.Mkdir(dir, 0o755); err != nil {
		t.Fatal(err)
	}
	secret := filepath.Join(root, "secret.bin")
	if err := os.WriteFile(secret, make([]byte, 12345), 0o600); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink("../secret.bin", filepath.Join(dir, "w.bin")); err != nil {
		t.Fatal(err)
	}
	if err := os.Mkdir(filepath.Join(dir, "sub"), 0o755); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink(root, filepath.Join(dir, "sub", "up")); err != nil {
		t.Fatal(err)
	}
	for _, loc := range []string{"w.bin", "sub/up/secret.bin"} {
		m, err := Decode(externalModel(loc, "length", "16"), Options{Path: filepath.Join(dir, "m.onnx")})
		if err != nil {
			t.Fatal(err) // the location as written stays inside: decoding accepts it
		}
		_, err = m.Graph.Initializers[0].RawBytes()
		if err == nil || !strings.Contains(err.Error(), "leads out of the model's folder") {
			t.Fatalf("%s: want a refusal, got %v", loc, err)
		}
		if strings.Contains(err.Error(), "12345") || strings.Contains(err.Error(), "secret.bin") && loc == "w.bin" {
			t.Errorf("%s: the error leaks the outside file: %v", loc, err)
		}
	}
	// A link to a file beside it is fine.
	if err := os.WriteFile(filepath.Join(dir, "real.bin"), make([]byte, 16), 0o644); err != nil {
		t.Fatal(err)
	}
	if err := os.Symlink("real.bin", filepath.Join(dir, "alias.bin")); err != nil {
		t.Fatal(err)
	}
	m, err := Decode(externalModel("alias.bin", "length", "16"), Options{Path: filepath.Join(dir, "m.onnx")})
	if err != nil {
		t.Fatal(err)
	}
	if b, err := m.Graph.Initializers[0].RawBytes(); err != nil || len(b) != 16 {
		t.Errorf("a link inside the folder: %d bytes, %v", len(b), err)
	}
}

// TestExternalDataNotRegularFile: external data that is a FIFO (opening it
// for reading would wait for a writer) or a link to a character device is
// refused before it is read. The test cannot hang: fifotest meets any
// reader of the pipe with a writer that closes at once, so code that opened
// it would fail here on the error text (too few bytes), not block.
func TestExternalDataNotRegularFile(t *testing.T) {
	dir := t.TempDir()
	fifotest.Make(t, filepath.Join(dir, "fifo.bin"))
	if err := os.Symlink("/dev/zero", filepath.Join(dir, "zero.bin")); err != nil {
		t.Fatal(err)
	}
	for loc, want := range map[string]string{"fifo.bin": "named pipe", "zero.bin": "leads out of the model's folder"} {
		m, err := Decode(externalModel(loc, "length", "16"), Options{Path: filepath.Join(dir, "m.onnx")})
		if err != nil {
			t.Fatal(err)
		}
		if _, err := m.Graph.Initializers[0].RawBytes(); err == nil || !strings.Contains(err.Error(), want) {
			t.Errorf("%s: want an error mentioning %q, got %v", loc, want, err)
		}
	}
	// A device inside the folder (a link's target outside it is refused
	// before its kind is looked at): the model's folder is /dev itself.
	m, err := Decode(externalModel("zero", "length", "16"), Options{Path: "/dev/m.onnx"})
	if err != nil {
		t.Fatal(err)
	}
	if _, err := m.Graph.Initializers[0].RawBytes(); err == nil || !strings.Contains(err.Error(), "character device") {
		t.Errorf("/dev/zero: want a refusal naming a character device, got %v", err)
	}
	if _, err := DecodeFile(filepath.Join(dir, "fifo.bin"), Options{}); err == nil || !strings.Contains(err.Error(), "named pipe") {
		t.Errorf("DecodeFile of a FIFO: %v", err)
	}
}
