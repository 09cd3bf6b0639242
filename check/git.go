package check

import (
	"bytes"
	"context"
	"crypto/sha256"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"os"
	"path"
	"path/filepath"
	"sort"
	"strconv"
	"strings"
	"sync"

	git "github.com/go-git/go-git/v5"
	"github.com/go-git/go-git/v5/plumbing"
	"github.com/go-git/go-git/v5/plumbing/cache"
	"github.com/go-git/go-git/v5/plumbing/filemode"
	"github.com/go-git/go-git/v5/plumbing/object"
	"github.com/go-git/go-git/v5/storage/filesystem"
)

// EnvError is an error of the environment rather than of the change:
// missing git objects, a shallow clone without the base, an LFS object not
// fetched. The CLI exits 3 on it.
type EnvError struct {
	Err  error
	Hint string // what to do about it
}

func (e *EnvError) Error() string {
	if e.Hint != "" {
		return e.Err.Error() + "\n  hint: " + e.Hint
	}
	return e.Err.Error()
}

func (e *EnvError) Unwrap() error { return e.Err }

// Repo is an opened git repository.
type Repo struct {
	r *git.Repository
	// mu serialises the calls into go-git's object store, whose caches
	// (open pack files, decoded objects) are not safe for concurrent use;
	// a large blob is streamed outside it, from a reader of its own.
	mu sync.Mutex
	// closeStore releases the pack files kept open for the run.
	closeStore func() error
	// cat reads blobs through git's own reader when it can (catfile.go).
	cat *catFiles
	// Root is the top of the working tree.
	Root string
	// CommonDir is the git directory shared by all worktrees, where the LFS
	// object store and loadline's cache live.
	CommonDir string
}

// OpenRepo opens the repository containing dir (a worktree works too).
func OpenRepo(dir string) (*Repo, error) {
	abs, err := filepath.Abs(dir)
	if err != nil {
		return nil, err
	}
	r, err := git.PlainOpenWithOptions(abs, &git.PlainOpenOptions{DetectDotGit: true, EnableDotGitCommonDir: true})
	if err != nil {
		if b, berr := git.PlainOpen(abs); berr == nil {
			r, err = b, nil // a bare repository: refused below, with its own message
		}
	}
	if err != nil {
		return nil, &EnvError{Err: fmt.Errorf("%s: not inside a git repository: %w", dir, err), Hint: "run loadline check from inside the repository, or use loadline compare for two files"}
	}
	wt, err := r.Worktree()
	if err != nil {
		return nil, &EnvError{Err: fmt.Errorf("%s: a bare repository has no working tree: %w", dir, err), Hint: "run loadline in a clone with a working tree (git clone " + abs + "), or use loadline compare for two files"}
	}
	root := wt.Filesystem.Root()
	common, err := commonDir(root)
	if err != nil {
		return nil, err
	}
	partial := false
	if cfg, err := r.Config(); err == nil && cfg.Raw != nil {
		partial = cfg.Raw.Section("extensions").Option("partialclone") != ""
	}
	repo := &Repo{r: r, Root: root, CommonDir: common, closeStore: func() error { return nil }, cat: newCatFiles(common, partial)}
	// Reopen the object store so that it keeps each pack file open for the
	// run instead of opening it again for every object, and hands blobs
	// larger than largeObject out as streams instead of reading each into
	// a growing in-memory copy (hashed again when cached).
	if fs, ok := r.Storer.(*filesystem.Storage); ok {
		st := filesystem.NewStorageWithOptions(fs.Filesystem(), cache.NewObjectLRUDefault(), filesystem.Options{KeepDescriptors: true, LargeObjectThreshold: largeObject})
		if kept, err := git.Open(st, wt.Filesystem); err == nil {
			repo.r, repo.closeStore = kept, st.Close
		}
	}
	return repo, nil
}

// largeObject is the size above which go-git streams a blob from its pack
// or loose file rather than inflating it into memory first.
const largeObject = 1 << 20

// Close releases the files the repository keeps open.
func (r *Repo) Close() error {
	if r == nil || r.closeStore == nil {
		return nil
	}
	r.cat.close()
	return r.closeStore()
}

// commonDir finds the git directory shared by worktrees: .git itself, or
// for a linked worktree the folder its commondir file names.
func commonDir(root string) (string, error) {
	dotgit := filepath.Join(root, ".git")
	st, err := os.Stat(dotgit)
	if err != nil {
		return "", &EnvError{Err: fmt.Errorf("%s: %w", dotgit, err)}
	}
	if st.IsDir() {
		return dotgit, nil
	}
	// A linked worktree: ".git" is a file "gitdir: <path>".
	b, err := os.ReadFile(dotgit)
	if err != nil {
		return "", &EnvError{Err: err}
	}
	gitdir := strings.TrimSpace(strings.TrimPrefix(strings.TrimSpace(string(b)), "gitdir:"))
	if !filepath.IsAbs(gitdir) {
		gitdir = filepath.Join(root, gitdir)
	}
	if c, err := os.ReadFile(filepath.Join(gitdir, "commondir")); err == nil {
		cd := strings.TrimSpace(string(c))
		if !filepath.IsAbs(cd) {
			cd = filepath.Join(gitdir, cd)
		}
		return filepath.Clean(cd), nil
	}
	return gitdir, nil
}

// Snapshot is the set of files of one revision (a commit, or the index).
type Snapshot struct {
	repo *Repo
	// Label is the revision as the user named it; Commit its hash (zero
	// for the index).
	Label  string
	Commit plumbing.Hash
	tree   *object.Tree
	// treeMu guards the file list of a commit (list).
	treeMu sync.Mutex
	// folders holds each folder of tree decoded so far, by path from the
	// root ("" is the root): every folder is decoded once per snapshot and
	// every later look-up is a map read. foldersMu guards it; the
	// measuring workers share a snapshot.
	foldersMu sync.Mutex
	folders   map[string]map[string]object.TreeEntry
	files     map[string]plumbing.Hash // for the index
	links     map[string]bool          // the index's symbolic links
	subs      []string                 // submodules (the index's, or a commit's once listed)
	// paths and listed cache a commit's file list (see list).
	paths  []string
	listed bool
}

// Resolve returns the snapshot of a revision ("HEAD", "origin/main", a hash).
func (r *Repo) Resolve(rev string) (*Snapshot, error) {
	h, err := r.r.ResolveRevision(plumbing.Revision(rev))
	if err != nil {
		return nil, r.missing(rev, err)
	}
	c, err := r.r.CommitObject(*h)
	if err != nil {
		return nil, r.missing(rev, err)
	}
	t, err := c.Tree()
	if err != nil {
		return nil, r.missing(rev, err)
	}
	return &Snapshot{repo: r, Label: rev, Commit: c.Hash, tree: t}, nil
}

// missing turns a failed lookup into an environment error with a hint; a
// shallow clone is the usual cause on CI.
func (r *Repo) missing(rev string, err error) error {
	hint := "check the revision name; fetch it with git fetch origin " + rev
	if branch, ok := strings.CutPrefix(rev, "origin/"); ok {
		hint = "fetch the branch: git fetch origin +refs/heads/" + branch + ":refs/remotes/origin/" + branch
	}
	if _, herr := r.r.Head(); errors.Is(herr, plumbing.ErrReferenceNotFound) {
		hint = "the repository has no commits yet: commit first (a pre-commit hook checks the index with --staged)"
	} else if _, serr := os.Stat(filepath.Join(r.CommonDir, "shallow")); serr == nil {
		hint = "this is a shallow clone and the base is not in it: fetch more history (git fetch --unshallow, or fetch-depth: 0 on CI checkout)"
	}
	return &EnvError{Err: fmt.Errorf("revision %q: %w", rev, err), Hint: hint}
}

// Index returns the snapshot of the staged files.
func (r *Repo) Index() (*Snapshot, error) {
	idx, err := r.r.Storer.Index()
	if err != nil {
		return nil, &EnvError{Err: fmt.Errorf("reading the git index: %w", err)}
	}
	files := make(map[string]plumbing.Hash, len(idx.Entries))
	links := map[string]bool{}
	var subs []string
	for _, e := range idx.Entries {
		// Submodules are no files; an unmerged path has no staged content
		// yet; an intent-to-add entry (git add -N) names the empty blob
		// and git commit leaves it out.
		if e.Mode == filemode.Submodule && e.Stage == 0 {
			subs = append(subs, e.Name)
		}
		if e.Mode == filemode.Submodule || e.Stage != 0 || e.IntentToAdd {
			continue
		}
		files[e.Name] = e.Hash
		if e.Mode == filemode.Symlink {
			links[e.Name] = true
		}
	}
	sort.Strings(subs)
	return &Snapshot{repo: r, Label: "index", files: files, links: links, subs: subs}, nil
}

// MergeBase returns the best common ancestor of two revisions.
func (r *Repo) MergeBase(a, b *Snapshot) (*Snapshot, error) {
	ca, err := r.r.CommitObject(a.Commit)
	if err != nil {
		return nil, r.missing(a.Label, err)
	}
	cb, err := r.r.CommitObject(b.Commit)
	if err != nil {
		return nil, r.missing(b.Label, err)
	}
	bases, err := ca.MergeBase(cb)
	if err != nil {
		return nil, r.missing(a.Label+"..."+b.Label, err)
	}
	if len(bases) == 0 {
		return nil, &EnvError{Err: fmt.Errorf("%s and %s have no common ancestor", a.Label, b.Label), Hint: "fetch more history, or name the base with --base"}
	}
	s, err := r.Resolve(bases[0].Hash.String())
	if err != nil {
		return nil, err
	}
	s.Label = "merge-base(" + a.Label + ", " + b.Label + ")"
	return s, nil
}

// DefaultBranch returns the branch the remote's HEAD names
// (refs/remotes/origin/HEAD), else origin/main, origin/master, main or
// master, whichever exists first.
func (r *Repo) DefaultBranch() (string, error) {
	if ref, err := r.r.Storer.Reference(plumbing.ReferenceName("refs/remotes/origin/HEAD")); err == nil {
		if ref.Type() == plumbing.SymbolicReference {
			return strings.TrimPrefix(ref.Target().String(), "refs/remotes/"), nil
		}
	}
	for _, name := range []string{"refs/remotes/origin/main", "refs/remotes/origin/master", "refs/heads/main", "refs/heads/master"} {
		if _, err := r.r.Storer.Reference(plumbing.ReferenceName(name)); err == nil {
			return strings.TrimPrefix(strings.TrimPrefix(name, "refs/remotes/"), "refs/heads/"), nil
		}
	}
	return "", &EnvError{Err: errNoDefaultBranch, Hint: "name the base with --base"}
}

var errNoDefaultBranch = errors.New("cannot tell the default branch: no origin/HEAD, main or master")

// empty is the snapshot of no files: the base of a repository's first
// commit, or of a branch with nothing to compare it with.
func (r *Repo) empty() *Snapshot {
	return &Snapshot{repo: r, Label: "empty", files: map[string]plumbing.Hash{}}
}

// maxLinkHops bounds how many symbolic links Hash follows for one path
// (a cycle of links ends there); maxLinkTarget bounds a link's blob.
const (
	maxLinkHops   = 8
	maxLinkTarget = 4096
)

// Hash returns the blob id of path in the snapshot, following symbolic
// links inside the repository (models/current.onnx -> v7.onnx); ok is
// false when the file does not exist there, or is a link that leaves the
// repository, dangles or loops.
func (s *Snapshot) Hash(p string) (plumbing.Hash, bool) {
	for range maxLinkHops {
		h, link, ok := s.entry(p)
		if !ok || !link {
			return h, ok
		}
		target, err := s.repo.readRawBlob(h, maxLinkTarget)
		if err != nil {
			return plumbing.ZeroHash, false
		}
		if p, err = linkTarget(p, string(target)); err != nil {
			return plumbing.ZeroHash, false
		}
	}
	return plumbing.ZeroHash, false
}

// entry returns the blob id of path as stored, and whether it is a
// symbolic link.
func (s *Snapshot) entry(p string) (h plumbing.Hash, link, ok bool) {
	if s.files != nil {
		h, ok := s.files[p]
		return h, s.links[p], ok
	}
	e, ok := s.lookup(p)
	if !ok || !e.Mode.IsFile() {
		return plumbing.ZeroHash, false, false
	}
	return e.Hash, e.Mode == filemode.Symlink, true
}

// lookup returns the tree entry of path in a commit's snapshot, decoding
// each folder on the way at most once.
func (s *Snapshot) lookup(p string) (object.TreeEntry, bool) {
	s.foldersMu.Lock()
	defer s.foldersMu.Unlock()
	dir, name := "", p
	for {
		entries, err := s.folder(dir)
		if err != nil {
			return object.TreeEntry{}, false
		}
		first, rest, more := strings.Cut(name, "/")
		e, ok := entries[first]
		if !ok || !more {
			return e, ok
		}
		if e.Mode != filemode.Dir {
			return object.TreeEntry{}, false
		}
		dir, name = path.Join(dir, first), rest
	}
}

// folder returns the entries of a folder of the snapshot's tree, decoding
// it on first use; the caller holds foldersMu and has looked up every
// folder above it, so its entry is known.
func (s *Snapshot) folder(dir string) (map[string]object.TreeEntry, error) {
	if f, ok := s.folders[dir]; ok {
		return f, nil
	}
	var h plumbing.Hash
	if dir == "" {
		h = s.tree.Hash
	} else {
		parent, base := path.Dir(dir), path.Base(dir)
		if parent == "." {
			parent = ""
		}
		e, ok := s.folders[parent][base]
		if !ok || e.Mode != filemode.Dir {
			return nil, fmt.Errorf("%s: not a folder of %s", dir, s.Label)
		}
		h = e.Hash
	}
	s.repo.mu.Lock()
	t, err := s.repo.r.TreeObject(h)
	s.repo.mu.Unlock()
	if err != nil {
		return nil, err
	}
	f := make(map[string]object.TreeEntry, len(t.Entries))
	for _, e := range t.Entries {
		f[e.Name] = e
	}
	if s.folders == nil {
		s.folders = map[string]map[string]object.TreeEntry{}
	}
	s.folders[dir] = f
	return f, nil
}

// Paths returns every file path in the snapshot, sorted.
func (s *Snapshot) Paths() ([]string, error) {
	if s.files != nil {
		out := make([]string, 0, len(s.files))
		for p := range s.files {
			out = append(out, p)
		}
		sort.Strings(out)
		return out, nil
	}
	if err := s.list(); err != nil {
		return nil, err
	}
	return append([]string(nil), s.paths...), nil
}

// list walks a commit's trees once, keeping its file paths and its
// submodules. It walks the trees only: tree.Files() would load every blob
// of the revision, all the models' bytes included, and fail in a blobless
// clone on a blob nobody asked for.
func (s *Snapshot) list() error {
	s.treeMu.Lock()
	defer s.treeMu.Unlock()
	if s.listed {
		return nil
	}
	var paths, subs []string
	// go-git's object store is shared with the measuring workers.
	s.repo.mu.Lock()
	defer s.repo.mu.Unlock()
	w := object.NewTreeWalker(s.tree, true, nil)
	defer w.Close()
	// Listing only: no name reaches the file system, so a name git
	// stores and go-git will not check out (a control character) is
	// listed rather than stopping the walk; reading it is refused later,
	// as an error of that model alone.
	w.SkipPathValidation()
	for {
		name, e, err := w.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			return &EnvError{Err: fmt.Errorf("listing the files of %s: %w", s.Label, err), Hint: "fetch the revision's trees (git fetch)"}
		}
		switch {
		case e.Mode.IsFile():
			paths = append(paths, name)
		case e.Mode == filemode.Submodule:
			subs = append(subs, name)
		}
	}
	sort.Strings(paths)
	sort.Strings(subs)
	s.paths, s.subs, s.listed = paths, subs, true
	return nil
}

// Submodules returns the paths of the snapshot's submodules (gitlinks:
// another repository's commit, no file), sorted.
func (s *Snapshot) Submodules() ([]string, error) {
	if s.files != nil {
		return s.subs, nil
	}
	if err := s.list(); err != nil {
		return nil, err
	}
	return s.subs, nil
}

// maxBlob bounds the size of a blob read into memory.
const maxBlob = 8 << 30

// Read returns the contents of path at the snapshot, with an LFS pointer
// resolved from the repository's local LFS object store.
func (s *Snapshot) Read(p string) ([]byte, error) {
	return s.ReadInto(p, nil)
}

// ReadInto is Read into *buf, grown as needed and kept for the next call
// (nil: a fresh slice). The bytes returned are valid until the next
// ReadInto with the same buffer.
func (s *Snapshot) ReadInto(p string, buf *[]byte) ([]byte, error) {
	h, ok := s.Hash(p)
	if !ok {
		return nil, s.notThere(p)
	}
	return s.repo.readBlob(h, p, s.Label, s.fetchRef(), buf)
}

// isFolder reports whether p is a folder in the snapshot.
func (s *Snapshot) isFolder(p string) bool {
	if s.files != nil {
		for f := range s.files {
			if strings.HasPrefix(f, p+"/") {
				return true
			}
		}
		return false
	}
	e, ok := s.lookup(p)
	return ok && e.Mode == filemode.Dir
}

// notThere says why a path has no file in the snapshot.
func (s *Snapshot) notThere(p string) error {
	if _, link, ok := s.entry(p); ok && link {
		return fmt.Errorf("%s at %s is a symbolic link that dangles, loops or leaves the repository: point it at a file inside the repository", p, s.Label)
	}
	return fmt.Errorf("%s: not in %s", p, s.Label)
}

// fetchRef is what to name to git lfs fetch for the snapshot's objects:
// its commit, or HEAD for the index (whose LFS objects git add stored).
func (s *Snapshot) fetchRef() string {
	if s.tree == nil {
		return "HEAD"
	}
	return s.Commit.String()
}

func (r *Repo) readBlob(h plumbing.Hash, p, label, fetchRef string, buf *[]byte) ([]byte, error) {
	data, err := r.streamBlob(h, maxBlob, buf)
	switch {
	case errors.Is(err, errBlobMissing):
		return nil, &EnvError{Err: fmt.Errorf("%s at %s: blob %s is missing from the object store: %w", p, label, h, err), Hint: "fetch the revision's objects (git fetch)"}
	case errors.Is(err, errBlobTooLarge):
		return nil, fmt.Errorf("%s at %s: %w", p, label, err)
	case err != nil:
		return nil, &EnvError{Err: fmt.Errorf("%s at %s: reading blob %s: %w", p, label, h, err)}
	}
	if ptr, ok := parseLFSPointer(data); ok {
		return r.readLFS(ptr, p, label, fetchRef, buf)
	}
	if len(data) <= maxLFSPointer && bytes.HasPrefix(data, []byte(lfsVersionPrefix)) {
		return nil, fmt.Errorf("%s at %s is a Git LFS pointer that does not parse (it needs an \"oid sha256:<64 hex digits>\" line and a \"size <bytes>\" line): commit the model again with Git LFS installed (git lfs install, then git add --renormalize %s)", p, label, p)
	}
	return data, nil
}

var (
	errBlobMissing  = errors.New("not in the object store")
	errBlobTooLarge = errors.New("blob too large")
)

// streamBlob reads a blob of at most limit bytes into *buf (grown as
// needed; nil buf: a fresh slice): through git cat-file when it can
// (catfile.go says why), else from go-git. go-git's object store is locked
// only to find the blob and open its stream: a large blob streams from its
// own file descriptor while the other workers look up theirs.
//
// Integrity: go-git does not compare an object's content with its id on
// read (nor does git cat-file); what catches a damaged object is zlib's
// Adler-32 checksum, which the inflater checks at the end of the stream.
// The stream is therefore always read to its end, and a blob longer or
// shorter than its header says is an error.
func (r *Repo) streamBlob(h plumbing.Hash, limit int64, buf *[]byte) ([]byte, error) {
	if p := r.cat.get(); p != nil {
		data, ok, err := p.read(h, limit, buf)
		r.cat.put(p, ok)
		switch {
		case err == nil:
			return data, nil
		case errors.Is(err, errBlobTooLarge):
			return nil, err
		case !ok:
			// git cannot serve this repository (an ownership refusal, a
			// process that died): go-git reads the rest.
			r.cat.disable()
		}
		// A missing object, or one that is no blob: go-git says so in
		// its own words.
	}
	r.mu.Lock()
	blob, err := r.r.BlobObject(h)
	if err != nil {
		r.mu.Unlock()
		return nil, fmt.Errorf("%w: %w", errBlobMissing, err)
	}
	if blob.Size > limit {
		r.mu.Unlock()
		return nil, fmt.Errorf("%w: %d bytes is larger than loadline reads (%d)", errBlobTooLarge, blob.Size, limit)
	}
	rd, err := blob.Reader()
	r.mu.Unlock()
	if err != nil {
		return nil, err
	}
	defer rd.Close()
	data := readBuffer(buf, blob.Size)
	if _, err := io.ReadFull(rd, data); err != nil {
		return nil, err
	}
	if err := atEnd(rd); err != nil {
		return nil, err
	}
	return data, nil
}

// atEnd reads a stream to its end (where zlib checks its checksum) and
// fails if any byte is left.
func atEnd(rd io.Reader) error {
	var one [1]byte
	for {
		n, err := rd.Read(one[:])
		if n > 0 {
			return errors.New("the object is longer than its header says")
		}
		if errors.Is(err, io.EOF) {
			return nil
		}
		if err != nil {
			return err
		}
	}
}

// lfsVersionPrefix starts every Git LFS pointer file; maxLFSPointer is the
// largest pointer the specification allows.
const (
	lfsVersionPrefix = "version https://git-lfs.github.com/spec/"
	maxLFSPointer    = 1024
)

// lfsPointer is a Git LFS pointer file's content.
type lfsPointer struct {
	OID  string // sha256, hex
	Size int64
}

// parseLFSPointer recognises the pointer format of the Git LFS
// specification (https://github.com/git-lfs/git-lfs/blob/main/docs/spec.md):
// a version line, an "oid sha256:" line and a size line, whose size "is in
// bytes", so never negative.
func parseLFSPointer(b []byte) (lfsPointer, bool) {
	if len(b) > maxLFSPointer || !bytes.HasPrefix(b, []byte(lfsVersionPrefix)) {
		return lfsPointer{}, false
	}
	var p lfsPointer
	for _, line := range strings.Split(string(b), "\n") {
		k, v, _ := strings.Cut(line, " ")
		switch k {
		case "oid":
			p.OID = strings.TrimPrefix(v, "sha256:")
		case "size":
			n, err := strconv.ParseInt(v, 10, 64)
			if err != nil || n < 0 {
				return lfsPointer{}, false
			}
			p.Size = n
		}
	}
	if len(p.OID) != 64 {
		return lfsPointer{}, false
	}
	if _, err := hex.DecodeString(p.OID); err != nil {
		return lfsPointer{}, false
	}
	return p, true
}

func (r *Repo) readLFS(ptr lfsPointer, p, label, fetchRef string, buf *[]byte) ([]byte, error) {
	obj := filepath.Join(r.CommonDir, "lfs", "objects", ptr.OID[0:2], ptr.OID[2:4], ptr.OID)
	f, err := os.Open(obj)
	var st os.FileInfo
	if err == nil {
		defer f.Close()
		st, err = f.Stat()
	}
	if err != nil {
		return nil, &EnvError{
			Err:  fmt.Errorf("%s at %s is a Git LFS pointer (oid %s…, %d bytes) and the object is not in the local LFS store", p, label, ptr.OID[:12], ptr.Size),
			Hint: "fetch it: git lfs fetch origin " + fetchRef + " (on CI, check out with lfs: true)",
		}
	}
	if !st.Mode().IsRegular() || st.Size() != ptr.Size || ptr.Size > maxBlob {
		return nil, &EnvError{Err: fmt.Errorf("%s at %s: LFS object %s has %d bytes, its pointer says %d", p, label, ptr.OID[:12], st.Size(), ptr.Size), Hint: "refetch it: git lfs fetch --all"}
	}
	data := readBuffer(buf, ptr.Size)
	// The pointer's blob is read into the same buffer first; it is
	// parsed already and no longer needed.
	sum := sha256.New()
	if _, err := io.ReadFull(io.TeeReader(f, sum), data); err != nil {
		return nil, &EnvError{Err: fmt.Errorf("%s at %s: reading LFS object %s: %w", p, label, ptr.OID[:12], err)}
	}
	if hex.EncodeToString(sum.Sum(nil)) != ptr.OID {
		return nil, &EnvError{Err: fmt.Errorf("%s at %s: LFS object %s is corrupt (its sha256 does not match)", p, label, ptr.OID[:12]), Hint: "refetch it: git lfs fetch --all"}
	}
	return data, nil
}

// FileChange is one file that differs between two snapshots.
type FileChange struct {
	Path    string // head path (base path for removals)
	OldPath string // base path, for renames
	Kind    string // "added", "modified", "removed", "renamed"
	OldHash plumbing.Hash
	NewHash plumbing.Hash
	// viaData marks a model whose own blob did not change, listed because
	// a file in or below its folder did: it has changed only if it reads
	// that file as external data.
	viaData bool
}

// Diff lists the files whose path satisfies want and whose content differs
// between base and head. Renames are detected by identical content, and
// between two commits also by go-git's similarity detection.
func Diff(base, head *Snapshot, want func(p string) bool) ([]FileChange, error) {
	if base.tree != nil && head.tree != nil {
		return diffTrees(base, head, want)
	}
	bp, err := base.Paths()
	if err != nil {
		return nil, err
	}
	hp, err := head.Paths()
	if err != nil {
		return nil, err
	}
	var out []FileChange
	var added, removed []FileChange
	inHead := map[string]bool{}
	for _, p := range hp {
		inHead[p] = true
		if !want(p) {
			continue
		}
		nh, _ := head.Hash(p)
		oh, ok := base.Hash(p)
		switch {
		case !ok:
			added = append(added, FileChange{Path: p, Kind: "added", NewHash: nh})
		case oh != nh:
			out = append(out, FileChange{Path: p, Kind: "modified", OldHash: oh, NewHash: nh})
		}
	}
	for _, p := range bp {
		if !inHead[p] && want(p) {
			oh, _ := base.Hash(p)
			removed = append(removed, FileChange{Path: p, Kind: "removed", OldHash: oh})
		}
	}
	// Exact renames: a removed and an added file with the same blob.
	used := map[int]bool{}
	for _, a := range added {
		matched := false
		for j, r := range removed {
			if !used[j] && r.OldHash == a.NewHash {
				used[j] = true
				out = append(out, FileChange{Path: a.Path, OldPath: r.Path, Kind: "renamed", OldHash: r.OldHash, NewHash: a.NewHash})
				matched = true
				break
			}
		}
		if !matched {
			out = append(out, a)
		}
	}
	for j, r := range removed {
		if !used[j] {
			out = append(out, r)
		}
	}
	sortChanges(out)
	return out, nil
}

func diffTrees(base, head *Snapshot, want func(p string) bool) ([]FileChange, error) {
	base.repo.mu.Lock()
	changes, err := object.DiffTreeWithOptions(context.Background(), base.tree, head.tree, &object.DiffTreeOptions{DetectRenames: true, RenameScore: 60, RenameLimit: 1000})
	base.repo.mu.Unlock()
	if err != nil {
		return nil, &EnvError{Err: fmt.Errorf("diffing %s..%s: %w", base.Label, head.Label, err)}
	}
	var out []FileChange
	for _, c := range changes {
		from, to := c.From.Name, c.To.Name
		// A submodule is another repository's commit, not a file: its
		// side of the change is no model (runRange notes it), as the
		// index leaves submodules out for --staged.
		if from != "" && c.From.TreeEntry.Mode == filemode.Submodule {
			from = ""
		}
		if to != "" && c.To.TreeEntry.Mode == filemode.Submodule {
			to = ""
		}
		if from == "" && to == "" {
			continue
		}
		switch {
		case from == "":
			if want(to) {
				out = append(out, FileChange{Path: to, Kind: "added", NewHash: c.To.TreeEntry.Hash})
			}
		case to == "":
			if want(from) {
				out = append(out, FileChange{Path: from, Kind: "removed", OldHash: c.From.TreeEntry.Hash})
			}
		case from != to:
			if n, ok := narrowRename(FileChange{Path: to, OldPath: from, Kind: "renamed", OldHash: c.From.TreeEntry.Hash, NewHash: c.To.TreeEntry.Hash}, want); ok {
				out = append(out, n)
			}
		default:
			if want(to) && c.From.TreeEntry.Hash != c.To.TreeEntry.Hash {
				out = append(out, FileChange{Path: to, Kind: "modified", OldHash: c.From.TreeEntry.Hash, NewHash: c.To.TreeEntry.Hash})
			}
		}
	}
	sortChanges(out)
	return out, nil
}

// narrowRename returns a rename as the paths want selects see it: a model
// renamed to a path that is no model (m.onnx to m.onnx.bak) is removed, a
// file renamed into a model path is an added model; ok is false when
// neither side is wanted.
func narrowRename(c FileChange, want func(string) bool) (FileChange, bool) {
	switch to, from := want(c.Path), want(c.OldPath); {
	case to && from:
		return c, true
	case to:
		return FileChange{Path: c.Path, Kind: "added", NewHash: c.NewHash}, true
	case from && IsModelPath(c.Path):
		// A model moved to a model path that is not wanted (a .tflite
		// file no rule names) is the same model: it stays a rename, to be
		// judged by the rule of its old path.
		return c, true
	case from:
		return FileChange{Path: c.OldPath, Kind: "removed", OldHash: c.OldHash}, true
	}
	return FileChange{}, false
}

func sortChanges(cs []FileChange) {
	sort.Slice(cs, func(i, j int) bool { return cs[i].Path < cs[j].Path })
}

// linkTarget resolves a symbolic link's target relative to the link's
// folder inside the repository, refusing targets that leave it.
func linkTarget(link, target string) (string, error) {
	if path.IsAbs(target) || filepath.IsAbs(target) {
		return "", fmt.Errorf("link target %q is absolute", target)
	}
	p := path.Clean(path.Join(path.Dir(link), filepath.ToSlash(target)))
	if p == ".." || strings.HasPrefix(p, "../") {
		return "", fmt.Errorf("link target %q leaves the repository", target)
	}
	return p, nil
}

// readRawBlob returns a blob's bytes as stored, without LFS resolution,
// refusing a blob larger than limit bytes.
func (r *Repo) readRawBlob(h plumbing.Hash, limit int64) ([]byte, error) {
	return r.streamBlob(h, limit, nil)
}
