//go:build unix

// Package fifotest makes named pipes for tests of code that must refuse
// them without reading them. Such a test must neither hang nor lean on a
// clock when the code under test regresses and opens the pipe after all:
// Make keeps a writer waiting at the other end, which closes as soon as a
// reader arrives, so a reader that should never have opened the pipe sees
// an empty file at once and the test fails on the error it gets.
package fifotest

import (
	"os"
	"sync/atomic"
	"syscall"
	"testing"
)

// Make creates a named pipe at path. Until the test ends, every open of it
// for reading is met by a writer that closes at once: the reader sees end
// of file instead of blocking.
func Make(t testing.TB, path string) {
	t.Helper()
	if err := syscall.Mkfifo(path, 0o644); err != nil {
		t.Fatal(err)
	}
	var stop atomic.Bool
	done := make(chan struct{})
	go func() {
		defer close(done)
		for !stop.Load() {
			// Blocks until some reader opens the pipe.
			w, err := os.OpenFile(path, os.O_WRONLY, 0)
			if err != nil {
				return
			}
			w.Close()
		}
	}()
	t.Cleanup(func() {
		stop.Store(true)
		// A reader of our own releases the writer's pending open; a
		// non-blocking open for reading never waits for a writer.
		r, err := os.OpenFile(path, os.O_RDONLY|syscall.O_NONBLOCK, 0)
		if err != nil {
			t.Errorf("releasing the writer of %s: %v", path, err)
			return
		}
		<-done
		r.Close()
	})
}
