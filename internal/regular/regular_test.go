//go:build unix

package regular

import (
	"os"
	"path/filepath"
	"strings"
	"testing"

	"github.com/loadline/loadline/internal/fifotest"
)

// TestRefusesFIFOAndDevices: a FIFO (opening it for reading would wait for
// a writer) and a character device (/dev/zero never ends) are refused at
// once; a regular file is read.
func TestRefusesFIFOAndDevices(t *testing.T) {
	dir := t.TempDir()
	fifo := filepath.Join(dir, "data.bin")
	fifotest.Make(t, fifo) // a reader that opened it anyway would see an empty file, not block
	if _, err := ReadFile(fifo, 1<<20); err == nil || !strings.Contains(err.Error(), "named pipe") {
		t.Errorf("FIFO: want a refusal naming a named pipe, got %v", err)
	}
	link := filepath.Join(dir, "zero.bin")
	if err := os.Symlink("/dev/zero", link); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadFile(link, 1<<20); err == nil || !strings.Contains(err.Error(), "character device") {
		t.Errorf("/dev/zero through a link: want a refusal naming a character device, got %v", err)
	}
	if _, err := ReadFile(dir, 1<<20); err == nil || !strings.Contains(err.Error(), "folder") {
		t.Errorf("folder: want a refusal, got %v", err)
	}
	plain := filepath.Join(dir, "plain.bin")
	if err := os.WriteFile(plain, []byte("abc"), 0o644); err != nil {
		t.Fatal(err)
	}
	if b, err := ReadFile(plain, 1<<20); err != nil || string(b) != "abc" {
		t.Errorf("regular file: got %q, %v", b, err)
	}
	if _, err := ReadFile(plain, 2); err == nil {
		t.Errorf("a file over the limit was read")
	}
}
