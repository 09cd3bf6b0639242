package check

import (
	"errors"
	"fmt"
	"github.com/loadline/loadline/internal/corpus"
	"github.com/loadline/loadline/internal/gittest"
	"os"
	"path/filepath"
	"strings"
	"sync"
	"testing"

	"github.com/loadline/loadline/measure"
	"github.com/loadline/loadline/model/build"
	"github.com/loadline/loadline/model/onnx"
)

// gitRepo is a real repository made with the git command in a temporary
// folder, for integration tests.
type gitRepo struct {
	t   *testing.T
	dir string
}

func newGitRepo(t *testing.T) *gitRepo {
	t.Helper()
	return &gitRepo{t: t, dir: gittest.Init(t)}
}

func (g *gitRepo) git(args ...string) string {
	g.t.Helper()
	return gittest.Run(g.t, g.dir, args...)
}

// runGit runs git in any folder (a clone, say).
func runGit(t *testing.T, dir string, args ...string) string {
	t.Helper()
	return gittest.Run(t, dir, args...)
}

func (g *gitRepo) write(p string, data []byte) {
	g.t.Helper()
	full := filepath.Join(g.dir, p)
	if err := os.MkdirAll(filepath.Dir(full), 0o755); err != nil {
		g.t.Fatal(err)
	}
	if err := os.WriteFile(full, data, 0o644); err != nil {
		g.t.Fatal(err)
	}
}

func (g *gitRepo) commit(msg string) string {
	g.t.Helper()
	g.git("add", "-A")
	g.git("commit", "-q", "-m", msg)
	return g.git("rev-parse", "HEAD")
}

// smallModel encodes build.ConvClassifier at 16×16 with the given width;
// different widths give different figures (params 32·width + 4).
func smallModel(t *testing.T, width int64) []byte {
	t.Helper()
	m, err := build.ConvClassifier("small", 16, width)
	if err != nil {
		t.Fatal(err)
	}
	data, err := onnx.Encode(m)
	if err != nil {
		t.Fatal(err)
	}
	return data
}

// snapshotAt opens the repository containing dir and resolves rev in it.
func snapshotAt(t *testing.T, dir, rev string) (*Repo, *Snapshot) {
	t.Helper()
	r, err := OpenRepo(dir)
	if err != nil {
		t.Fatal(err)
	}
	return r, resolve(t, r, rev)
}

// resolve resolves rev in r.
func resolve(t *testing.T, r *Repo, rev string) *Snapshot {
	t.Helper()
	s, err := r.Resolve(rev)
	if err != nil {
		t.Fatal(err)
	}
	return s
}

func isModel(p string) bool { return strings.HasSuffix(p, ".onnx") }

func changesText(cs []FileChange) string {
	var parts []string
	for _, c := range cs {
		s := c.Kind + " " + c.Path
		if c.OldPath != "" {
			s += " <- " + c.OldPath
		}
		parts = append(parts, s)
	}
	return strings.Join(parts, "; ")
}

func TestDiffKinds(t *testing.T) {
	g := newGitRepo(t)
	g.write("models/a.onnx", smallModel(t, 8))
	g.write("models/b.onnx", smallModel(t, 9))
	g.write("models/c.onnx", smallModel(t, 10))
	g.write("models/d.onnx", smallModel(t, 11))
	g.write("README.txt", []byte("notes"))
	base := g.commit("baseline")
	g.write("models/a.onnx", smallModel(t, 16))      // modified
	os.Remove(filepath.Join(g.dir, "models/b.onnx")) // removed
	g.git("mv", "models/c.onnx", "models/c2.onnx")   // renamed
	g.write("models/e.onnx", smallModel(t, 12))      // added
	g.write("README.txt", []byte("more notes"))      // not a model
	head := g.commit("change")                       // d.onnx unchanged

	r, bs := snapshotAt(t, filepath.Join(g.dir, "models"), base)
	hs := resolve(t, r, head)
	cs, err := Diff(bs, hs, isModel)
	if err != nil {
		t.Fatal(err)
	}
	want := "modified models/a.onnx; removed models/b.onnx; renamed models/c2.onnx <- models/c.onnx; added models/e.onnx"
	if got := changesText(cs); got != want {
		t.Errorf("changes:\n got %s\nwant %s", got, want)
	}
}

func TestMergeBaseAndDetachedHead(t *testing.T) {
	g := newGitRepo(t)
	g.write("m.onnx", smallModel(t, 8))
	fork := g.commit("base")
	g.git("checkout", "-q", "-b", "feature")
	g.write("m.onnx", smallModel(t, 12))
	g.commit("wider")
	g.git("checkout", "-q", "main")
	g.write("other.onnx", smallModel(t, 4))
	g.commit("main moves on")
	g.git("checkout", "-q", "feature")
	g.git("merge", "-q", "--no-edit", "main") // a merge commit on the feature
	g.git("checkout", "-q", "--detach", "HEAD")

	r, err := OpenRepo(g.dir)
	if err != nil {
		t.Fatal(err)
	}
	head, err := r.Resolve("HEAD")
	if err != nil {
		t.Fatalf("detached HEAD: %v", err)
	}
	branch, err := r.DefaultBranch()
	if err != nil || branch != "main" {
		t.Fatalf("default branch %q, %v", branch, err)
	}
	mainSnap, err := r.Resolve(branch)
	if err != nil {
		t.Fatal(err)
	}
	mb, err := r.MergeBase(head, mainSnap)
	if err != nil {
		t.Fatal(err)
	}
	// After merging main into feature, the merge-base is main's tip.
	if mb.Commit != mainSnap.Commit {
		t.Errorf("merge-base %s, want main's tip %s (fork point was %s)", mb.Commit, mainSnap.Commit, fork)
	}
	cs, err := Diff(mb, head, isModel)
	if err != nil {
		t.Fatal(err)
	}
	if got := changesText(cs); got != "modified m.onnx" {
		t.Errorf("changes %q, want only the feature's model change", got)
	}
}

func TestWorktree(t *testing.T) {
	g := newGitRepo(t)
	g.write("m.onnx", smallModel(t, 8))
	g.commit("base")
	wt := filepath.Join(t.TempDir(), "wt")
	g.git("worktree", "add", "-q", "-b", "side", wt)
	r, err := OpenRepo(wt)
	if err != nil {
		t.Fatal(err)
	}
	if r.CommonDir != filepath.Join(g.dir, ".git") {
		t.Errorf("common dir %s, want %s", r.CommonDir, filepath.Join(g.dir, ".git"))
	}
	s, err := r.Resolve("HEAD")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := s.Read("m.onnx"); err != nil {
		t.Fatal(err)
	}
}

func TestShallowCloneMissingBase(t *testing.T) {
	g := newGitRepo(t)
	g.write("m.onnx", smallModel(t, 8))
	base := g.commit("base")
	g.write("m.onnx", smallModel(t, 12))
	g.commit("change")
	clone := filepath.Join(t.TempDir(), "clone")
	runGit(t, t.TempDir(), "clone", "-q", "--depth", "1", "file://"+g.dir, clone)
	r, err := OpenRepo(clone)
	if err != nil {
		t.Fatal(err)
	}
	_, err = r.Resolve(base)
	var env *EnvError
	if !errors.As(err, &env) {
		t.Fatalf("want an environment error, got %v", err)
	}
	if !strings.Contains(env.Hint, "shallow") || !strings.Contains(env.Hint, "fetch") {
		t.Errorf("hint %q should say the clone is shallow and how to fetch", env.Hint)
	}
}

func TestStagedOnly(t *testing.T) {
	g := newGitRepo(t)
	g.write("staged.onnx", smallModel(t, 8))
	g.write("unstaged.onnx", smallModel(t, 8))
	g.commit("base")
	g.write("staged.onnx", smallModel(t, 16))
	g.git("add", "staged.onnx")
	g.write("unstaged.onnx", smallModel(t, 16)) // changed in the working tree only
	r, head := snapshotAt(t, g.dir, "HEAD")
	idx, err := r.Index()
	if err != nil {
		t.Fatal(err)
	}
	cs, err := Diff(head, idx, isModel)
	if err != nil {
		t.Fatal(err)
	}
	if got := changesText(cs); got != "modified staged.onnx" {
		t.Errorf("staged changes %q, want only staged.onnx", got)
	}
	// What is measured is the staged blob, not the working tree's file.
	data, err := idx.Read("unstaged.onnx")
	if err != nil {
		t.Fatal(err)
	}
	if string(data) != string(smallModel(t, 8)) {
		t.Error("the index snapshot read the working tree instead of the staged blob")
	}
}

func TestLFS(t *testing.T) {
	g := newGitRepo(t)
	corpus.Tool(t, "git-lfs", "git-lfs")
	g.git("lfs", "install", "--local")
	g.git("lfs", "track", "*.onnx")
	want := smallModel(t, 8)
	g.write("m.onnx", want)
	g.commit("lfs model")
	r, s := snapshotAt(t, g.dir, "HEAD")
	// The blob itself is a pointer.
	h, _ := s.Hash("m.onnx")
	raw, err := r.readRawBlob(h, maxLFSPointer)
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := parseLFSPointer(raw); !ok {
		t.Fatalf("the committed blob is not an LFS pointer: %q", raw[:min(len(raw), 60)])
	}
	got, err := s.Read("m.onnx")
	if err != nil {
		t.Fatalf("object present: %v", err)
	}
	if string(got) != string(want) {
		t.Fatal("LFS object content differs from the committed model")
	}
	// Missing object: a clear environment error saying how to fetch it.
	if err := os.RemoveAll(filepath.Join(g.dir, ".git", "lfs", "objects")); err != nil {
		t.Fatal(err)
	}
	_, err = s.Read("m.onnx")
	var env *EnvError
	if !errors.As(err, &env) || !strings.Contains(err.Error(), "LFS") || !strings.Contains(env.Hint, "git lfs fetch origin "+s.Commit.String()) {
		t.Fatalf("object missing: want an LFS environment error with a fetch hint, got %v", err)
	}
}

func TestCacheWarmAndCorrupt(t *testing.T) {
	g := newGitRepo(t)
	g.write("a.onnx", smallModel(t, 8))
	g.write("b.onnx", smallModel(t, 12))
	g.commit("base")
	r, s := snapshotAt(t, g.dir, "HEAD")
	cache := NewCache(r)
	jobs := []blobJob{{s, "a.onnx"}, {s, "b.onnx"}}
	var cold Stats
	first := measureBlobs(jobs, measure.Options{}, cache, &cold)
	if cold.Measured.Load() != 2 || cold.CacheHits.Load() != 0 {
		t.Fatalf("cold: measured %d, hits %d", cold.Measured.Load(), cold.CacheHits.Load())
	}
	var warm Stats
	second := measureBlobs(jobs, measure.Options{}, cache, &warm)
	if warm.Measured.Load() != 0 || warm.CacheHits.Load() != 2 {
		t.Fatalf("warm: measured %d, hits %d; the second check must measure nothing", warm.Measured.Load(), warm.CacheHits.Load())
	}
	if first[1].Params != second[1].Params || first[1].Params == 0 {
		t.Errorf("cached params %d differ from measured %d", second[1].Params, first[1].Params)
	}
	// Different dims are a different key.
	var dims Stats
	measureBlobs(jobs[:1], measure.Options{Dims: map[string]int64{"batch": 4}, Lenient: true}, cache, &dims)
	if dims.Measured.Load() != 1 {
		t.Error("a different --dim reused a cached entry")
	}
	// An entry measured without the per-layer view cannot answer a check
	// that reports it; once measured with it, both are answered.
	var layers Stats
	if m := measureBlobs(jobs[:1], measure.Options{Layers: true}, cache, &layers)[0]; layers.Measured.Load() != 1 || len(m.Layers) == 0 {
		t.Errorf("Layers: measured %d, %d layers; an entry without the per-layer view was reused", layers.Measured.Load(), len(m.Layers))
	}
	var layersWarm Stats
	if m := measureBlobs(jobs[:1], measure.Options{Layers: true}, cache, &layersWarm)[0]; layersWarm.CacheHits.Load() != 1 || len(m.Layers) == 0 {
		t.Errorf("Layers again: hits %d, %d layers; want the per-layer view from the cache", layersWarm.CacheHits.Load(), len(m.Layers))
	}
	// The deployed view's rewrites are a different key.
	var deploy Stats
	inPlace := measure.DefaultDeployOptions()
	inPlace.InPlaceDepthwise = true
	if measureBlobs(jobs[:1], measure.Options{Deploy: &inPlace}, cache, &deploy); deploy.Measured.Load() != 1 {
		t.Error("other deployed-view rewrites reused a cached entry")
	}
	// Corrupt every pack: ignored, measured again, rewritten.
	cache.Flush()
	cache = NewCache(r)
	filepath.Walk(cache.Dir, func(p string, info os.FileInfo, err error) error {
		if err == nil && !info.IsDir() {
			os.WriteFile(p, []byte("{not json"), 0o644)
		}
		return nil
	})
	var again Stats
	measureBlobs(jobs, measure.Options{}, cache, &again)
	if again.Measured.Load() != 2 {
		t.Fatalf("corrupt entries were used: measured %d", again.Measured.Load())
	}
	cache.Flush()
	cache = NewCache(r)
	var healed Stats
	measureBlobs(jobs, measure.Options{}, cache, &healed)
	if healed.CacheHits.Load() != 2 {
		t.Errorf("corrupt entries were not rewritten: hits %d", healed.CacheHits.Load())
	}
}

// TestCacheConcurrentRuns: two checks of the same change at once share the
// cache without corrupting it; a third finds every entry.
func TestCacheConcurrentRuns(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte("version: 1\ndevices:\n  d: {ram: 64MiB}\nmodels:\n  - path: \"*.onnx\"\n    device: d\n    limits: {params: 1M}\n"))
	for i := 0; i < 6; i++ {
		g.write(fmt.Sprintf("m%d.onnx", i), smallModel(t, int64(4+i)))
	}
	g.commit("base")
	for i := 0; i < 6; i++ {
		g.write(fmt.Sprintf("m%d.onnx", i), smallModel(t, int64(10+i)))
	}
	g.commit("change")
	var wg sync.WaitGroup
	errs := make([]error, 4)
	for k := range errs {
		wg.Add(1)
		go func() {
			defer wg.Done()
			_, _, errs[k] = Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
		}()
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			t.Fatal(err)
		}
	}
	res, st, err := Run(Options{Dir: g.dir, Base: "HEAD~1", Head: "HEAD"})
	if err != nil {
		t.Fatal(err)
	}
	if st.Measured.Load() != 0 || st.CacheHits.Load() != 12 || len(res.Models) != 6 {
		t.Errorf("after concurrent runs: measured %d, hits %d, models %d; want 0, 12, 6", st.Measured.Load(), st.CacheHits.Load(), len(res.Models))
	}
}

// TestDiffRenameAcrossModelPaths: a rename that leaves or enters the set
// of model paths is a removal or an addition, not a rename whose other
// side cannot be measured.
func TestDiffRenameAcrossModelPaths(t *testing.T) {
	g := newGitRepo(t)
	g.write("models/a.onnx", smallModel(t, 8))
	g.write("models/b.bin", smallModel(t, 9))
	base := g.commit("baseline")
	g.git("mv", "models/a.onnx", "models/a.onnx.bak")
	g.git("mv", "models/b.bin", "models/b.onnx")
	head := g.commit("swap")
	r, bs := snapshotAt(t, g.dir, base)
	hs := resolve(t, r, head)
	cs, err := Diff(bs, hs, isModel)
	if err != nil {
		t.Fatal(err)
	}
	want := "removed models/a.onnx; added models/b.onnx"
	if got := changesText(cs); got != want {
		t.Errorf("changes:\n got %s\nwant %s", got, want)
	}
}

// TestLFSPointerThatDoesNotParse: a blob that starts like an LFS pointer
// but lacks its oid is reported as a broken pointer with what to do, not
// measured as a model that is "not an ONNX model".
func TestLFSPointerThatDoesNotParse(t *testing.T) {
	g := newGitRepo(t)
	g.write("m.onnx", []byte("version https://git-lfs.github.com/spec/v1\noid sha256:12ab\nsize 1234\n"))
	g.commit("a truncated pointer")
	_, s := snapshotAt(t, g.dir, "HEAD")
	_, err := s.Read("m.onnx")
	if err == nil || !strings.Contains(err.Error(), "LFS pointer that does not parse") || !strings.Contains(err.Error(), "git add --renormalize m.onnx") {
		t.Fatalf("want a broken-pointer error saying how to recommit, got %v", err)
	}
}

// TestLFSPointerNegativeSizeDoesNotParse: a pointer whose size is
// negative (found by FuzzParseLFSPointer) is a broken pointer, reported
// with what to do, not an object to fetch from the LFS store.
func TestLFSPointerNegativeSizeDoesNotParse(t *testing.T) {
	oid := "4d7a214614ab2935c943f9e0ff69d22eadbb8f32b1258daaa5e2ca24d17e2393" // the specification's example
	if _, ok := parseLFSPointer([]byte("version https://git-lfs.github.com/spec/v1\noid sha256:" + oid + "\nsize -1\n")); ok {
		t.Error("a pointer of size -1 parsed")
	}
	if p, ok := parseLFSPointer([]byte("version https://git-lfs.github.com/spec/v1\noid sha256:" + oid + "\nsize 0\n")); !ok || p.Size != 0 {
		t.Errorf("a pointer of size 0: %+v, %v", p, ok)
	}
	g := newGitRepo(t)
	g.write("m.onnx", []byte("version https://git-lfs.github.com/spec/v1\noid sha256:"+oid+"\nsize -1\n"))
	g.commit("a pointer of negative size")
	_, s := snapshotAt(t, g.dir, "HEAD")
	_, err := s.Read("m.onnx")
	var env *EnvError
	if err == nil || errors.As(err, &env) || !strings.Contains(err.Error(), "LFS pointer that does not parse") {
		t.Fatalf("want a broken-pointer error (not an environment error), got %v", err)
	}
}

// TestBareRepositorySaysWhatToDo: a bare repository is an environment
// error with a hint.
func TestBareRepositorySaysWhatToDo(t *testing.T) {
	corpus.Tool(t, "git", "git")
	dir := t.TempDir()
	runGit(t, dir, "init", "-q", "--bare")
	_, err := OpenRepo(dir)
	var env *EnvError
	if !errors.As(err, &env) || !strings.Contains(env.Hint, "git clone") {
		t.Fatalf("bare repository: %v; want an environment error whose hint says to clone", err)
	}
}

// TestCheckWithoutCommitsSaysSo: in a repository without commits the
// missing HEAD is explained, not sent to git fetch; --staged judges
// everything staged as added.
func TestCheckWithoutCommitsSaysSo(t *testing.T) {
	g := newGitRepo(t)
	g.write("loadline.yaml", []byte(runBudget))
	g.write("m.onnx", smallModel(t, 200))
	g.git("add", "-A")
	_, _, err := Run(Options{Dir: g.dir, Base: "main", NoCache: true})
	var env *EnvError
	if !errors.As(err, &env) || !strings.Contains(env.Hint, "no commits yet") {
		t.Errorf("no commits: %v; want an environment error whose hint says there are no commits", err)
	}
	res, _, err := Run(Options{Dir: g.dir, Staged: true, NoCache: true})
	if err != nil {
		t.Fatal(err)
	}
	if res.Base.Ref != "empty" || len(res.Models) != 1 || res.Models[0].Change != "added" || res.Verdict != "fail" {
		t.Errorf("--staged before the first commit: base %q, models %+v, verdict %s; want m.onnx added and over its params limit", res.Base.Ref, res.Models, res.Verdict)
	}
}

// TestConcurrentMeasuringOfAPackedRevision: the measuring workers share a
// snapshot; looking paths up in its tree filled go-git's caches from
// several goroutines at once (a data race, and a fatal concurrent map
// write when it struck). Run with -race to see it; the objects are packed,
// as in a real clone.
func TestConcurrentMeasuringOfAPackedRevision(t *testing.T) {
	g := newGitRepo(t)
	var paths []string
	for i := range 16 {
		p := fmt.Sprintf("models/f%d/g%d/m.onnx", i%4, i)
		g.write(p, smallModel(t, int64(4+i)))
		paths = append(paths, p)
	}
	g.commit("sixteen models")
	g.git("gc", "-q")
	_, s := snapshotAt(t, g.dir, "HEAD")
	jobs := make([]blobJob, len(paths))
	for i, p := range paths {
		jobs[i] = blobJob{s, p}
	}
	var st Stats
	for i, m := range measureBlobs(jobs, measure.Options{}, nil, &st) {
		if m.Error != "" || m.Params != 32*int64(4+i)+4 { // smallModel: 28·w + 4·w + 4 params (hand-worked)
			t.Errorf("%s: params %d, error %q", paths[i], m.Params, m.Error)
		}
	}
}
