package check

import (
	"bufio"
	"bytes"
	"errors"
	"fmt"
	"io"
	"os"
	"os/exec"
	"strconv"
	"strings"
	"sync"

	"github.com/go-git/go-git/v5/plumbing"
)

// Blobs are read through `git cat-file --batch` when the git command is
// installed: one long-lived process per measuring worker, which inflates
// with the C zlib. Measured on a change of 20 models of 20 MB (loose and
// packed), go-git's inflater took about 3 times the processor time of git's
// for the same blobs, and reading them was nearly all of a cold check.
// go-git remains the fallback: without the git command, in a partial clone
// (where git would fetch a missing blob from the network instead of
// reporting it), and for any blob git cannot hand over.
//
// Neither reader compares a blob's content with its id: git does not on
// read either (git fsck does). What catches a damaged object is zlib's
// Adler-32 checksum, which both inflaters check at the end of the stream
// (git reads every object to its end; streamBlob does the same with go-git).

// catFiles is the pool of cat-file processes of a repository.
type catFiles struct {
	gitDir string
	mu     sync.Mutex
	idle   []*catFile
	all    []*catFile
	off    bool // no git command, or a repository git must not read this way
}

// catFile is one `git cat-file --batch` process.
type catFile struct {
	cmd *exec.Cmd
	in  io.WriteCloser
	out *bufio.Reader
}

// maxCatFiles bounds the processes a run starts (the workers are one per
// CPU; a few more readers are the budget file and links, read in between).
const maxCatFiles = 16

// newCatFiles prepares the pool; partial tells a partial clone.
func newCatFiles(gitDir string, partial bool) *catFiles {
	c := &catFiles{gitDir: gitDir}
	if _, err := exec.LookPath("git"); err != nil || partial || os.Getenv("LOADLINE_GIT_READER") == "go-git" {
		c.off = true
	}
	return c
}

// get takes an idle process or starts one; nil when none can be had.
func (c *catFiles) get() *catFile {
	if c == nil {
		return nil
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	if c.off {
		return nil
	}
	if n := len(c.idle); n > 0 {
		p := c.idle[n-1]
		c.idle = c.idle[:n-1]
		return p
	}
	if len(c.all) >= maxCatFiles {
		return nil
	}
	cmd := exec.Command("git", "--git-dir="+c.gitDir, "cat-file", "--batch")
	// The object store is the one go-git opened: no variable of a hook's
	// environment points git elsewhere.
	for _, kv := range os.Environ() {
		if k, _, _ := strings.Cut(kv, "="); !strings.HasPrefix(k, "GIT_") || k == "GIT_CONFIG_NOSYSTEM" {
			cmd.Env = append(cmd.Env, kv)
		}
	}
	in, err := cmd.StdinPipe()
	if err != nil {
		c.off = true
		return nil
	}
	out, err := cmd.StdoutPipe()
	if err != nil {
		c.off = true
		return nil
	}
	if err := cmd.Start(); err != nil {
		c.off = true
		return nil
	}
	p := &catFile{cmd: cmd, in: in, out: bufio.NewReaderSize(out, 1<<16)}
	c.all = append(c.all, p)
	return p
}

// put returns a process that is ready for the next request; a broken one
// is stopped instead.
func (c *catFiles) put(p *catFile, ok bool) {
	if !ok {
		p.stop()
		return
	}
	c.mu.Lock()
	c.idle = append(c.idle, p)
	c.mu.Unlock()
}

// disable sends every later read to go-git.
func (c *catFiles) disable() {
	c.mu.Lock()
	c.off = true
	c.mu.Unlock()
}

// close stops every process.
func (c *catFiles) close() {
	if c == nil {
		return
	}
	c.mu.Lock()
	defer c.mu.Unlock()
	for _, p := range c.all {
		p.stop()
	}
	c.all, c.idle, c.off = nil, nil, true
}

func (p *catFile) stop() {
	p.in.Close()
	if p.cmd.ProcessState == nil {
		p.cmd.Process.Kill()
		p.cmd.Wait()
	}
}

// errCatFileMissing is git's answer for an object it does not have.
var errCatFileMissing = errors.New("git cat-file: object missing")

// read asks for one blob and reads it into *buf (grown as needed; nil buf:
// a fresh slice), refusing one larger than limit. ok reports whether the
// process can take another request.
func (p *catFile) read(h plumbing.Hash, limit int64, buf *[]byte) (data []byte, ok bool, err error) {
	if _, err := io.WriteString(p.in, h.String()+"\n"); err != nil {
		return nil, false, err
	}
	line, err := p.out.ReadSlice('\n')
	if err != nil {
		return nil, false, err
	}
	f := strings.Fields(string(line))
	switch {
	case len(f) == 2 && f[1] == "missing" && f[0] == h.String():
		return nil, true, errCatFileMissing
	case len(f) != 3 || f[0] != h.String():
		return nil, false, fmt.Errorf("git cat-file answered %q for %s", bytes.TrimSpace(line), h)
	case f[1] != "blob":
		// Its answer is read, so the process can go on.
		n, _ := strconv.ParseInt(f[2], 10, 64)
		_, err := p.out.Discard(int(n) + 1)
		return nil, err == nil, fmt.Errorf("object %s is a %s, not a blob", h, f[1])
	}
	size, err := strconv.ParseInt(f[2], 10, 64)
	if err != nil || size < 0 {
		return nil, false, fmt.Errorf("git cat-file answered %q for %s", bytes.TrimSpace(line), h)
	}
	if size > limit {
		return nil, false, fmt.Errorf("%w: %d bytes is larger than loadline reads (%d)", errBlobTooLarge, size, limit)
	}
	data = readBuffer(buf, size)
	if _, err := io.ReadFull(p.out, data); err != nil {
		return nil, false, err
	}
	if b, err := p.out.ReadByte(); err != nil || b != '\n' {
		return nil, false, fmt.Errorf("git cat-file: no newline after %s", h)
	}
	return data, true, nil
}

// readBuffer is where a blob of size bytes is read: *buf, grown when it is
// too small, for a worker that reads blob after blob into one buffer; a
// new slice when buf is nil.
func readBuffer(buf *[]byte, size int64) []byte {
	if buf == nil {
		return make([]byte, size)
	}
	if int64(cap(*buf)) < size {
		*buf = make([]byte, size)
	}
	return (*buf)[:size]
}
