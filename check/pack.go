package check

import (
	"bufio"
	"bytes"
	"crypto/rand"
	"encoding/binary"
	"encoding/hex"
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"sync"
	"syscall"
)

// A cache pack is one file of entries with a sorted index in front:
//
//	magic   "loadline-cache-pack-1\n"
//	count   uint32, little-endian
//	index   count × (key [21]byte, offset uint64, length uint32), by key
//	data    the entries: figures in the binary form of entry.go, the
//	        per-layer view as a JSON document
//
// A key is the 20-byte digest of a cacheKey and one byte for the kind of
// entry (figures or detail). A pack is written once, to a temporary file
// renamed into place, and never changed.
const packMagic = "loadline-cache-pack-1\n"

const (
	kindFigures byte = 'f'
	kindDetail  byte = 'd'

	packKeyLen    = 21
	packRecordLen = packKeyLen + 8 + 4
	packSuffix    = ".llpack"
	// maxPackEntries bounds the index a pack may claim; maxPacks is how
	// many packs may pile up before a run merges them into one.
	maxPackEntries = 1 << 20
	maxPacks       = 8
)

// packKey names one entry in a pack.
type packKey [packKeyLen]byte

func (k cacheKey) pack(kind byte) packKey {
	var pk packKey
	copy(pk[:], k.digest[:])
	pk[20] = kind
	return pk
}

// pack is one open pack file and its index.
type pack struct {
	path string
	f    *os.File
	size int64
	keys []packKey
	at   []packSpan
	// data is the file mapped read-only (packmap_unix.go), nil where it
	// could not be mapped; unmap releases it.
	data  []byte
	unmap func()
}

type packSpan struct {
	off int64
	n   int64
}

// openPack opens a pack for the run, refusing what is not a regular file
// and an index that does not fit the file.
func openPack(p string) (*pack, error) {
	f, st, err := openRegular(p)
	if err != nil {
		return nil, err
	}
	fail := func(why string) (*pack, error) {
		f.Close()
		return nil, fmt.Errorf("%s: %s", p, why)
	}
	size := st.Size()
	head := make([]byte, len(packMagic)+4)
	if _, err := f.ReadAt(head, 0); err != nil || string(head[:len(packMagic)]) != packMagic {
		return fail("not a cache pack")
	}
	n := int64(binary.LittleEndian.Uint32(head[len(packMagic):]))
	start := int64(len(head))
	if n > maxPackEntries || start+n*packRecordLen > size {
		return fail("its index does not fit the file")
	}
	index := make([]byte, n*packRecordLen)
	if _, err := f.ReadAt(index, start); err != nil {
		return fail("its index cannot be read")
	}
	pk := &pack{path: p, f: f, size: size, keys: make([]packKey, n), at: make([]packSpan, n)}
	// The entries lie after the index and within the file, and together
	// are no larger than the file's data: records that share their bytes
	// would make a merge, which reads every entry, allocate many times the
	// file.
	data, total := start+n*packRecordLen, int64(0)
	for i := range pk.keys {
		r := index[int64(i)*packRecordLen:]
		copy(pk.keys[i][:], r[:packKeyLen])
		off := binary.LittleEndian.Uint64(r[packKeyLen:])
		s := packSpan{int64(off), int64(binary.LittleEndian.Uint32(r[packKeyLen+8:]))}
		if off > uint64(size) || s.off < data || s.n > size-s.off {
			return fail(fmt.Sprintf("its record %d (offset %d, %d bytes) is outside the file's %d bytes of entries", i, off, s.n, size-data))
		}
		if total += s.n; total > size-data {
			return fail(fmt.Sprintf("its records claim more than the file's %d bytes of entries", size-data))
		}
		pk.at[i] = s
		if i > 0 && bytes.Compare(pk.keys[i-1][:], pk.keys[i][:]) >= 0 {
			return fail("its index is not sorted")
		}
	}
	pk.data, pk.unmap = mapPack(f, size)
	return pk, nil
}

// close releases the pack's file and mapping.
func (p *pack) close() {
	if p.unmap != nil {
		p.unmap()
		p.data, p.unmap = nil, nil
	}
	p.f.Close()
}

// get returns the entry of a key, refusing one longer than limit or
// outside the file.
func (p *pack) get(k packKey, limit int64) ([]byte, bool) {
	s, ok := p.span(k, limit)
	if !ok {
		return nil, false
	}
	if p.data != nil {
		return copyMapped(p.data[s.off:s.off+s.n], bytes.Clone)
	}
	return p.read(s)
}

// getString is get for an entry read as text (the figures, entry.go):
// copied once, into the string.
func (p *pack) getString(k packKey, limit int64) (string, bool) {
	s, ok := p.span(k, limit)
	if !ok {
		return "", false
	}
	if p.data != nil {
		return copyMapped(p.data[s.off:s.off+s.n], func(b []byte) string { return string(b) })
	}
	b, ok := p.read(s)
	return string(b), ok
}

// span finds the entry of a key, within the file and no longer than
// limit.
func (p *pack) span(k packKey, limit int64) (packSpan, bool) {
	i := sort.Search(len(p.keys), func(i int) bool { return bytes.Compare(p.keys[i][:], k[:]) >= 0 })
	if i == len(p.keys) || p.keys[i] != k {
		return packSpan{}, false
	}
	s := p.at[i]
	if s.n > limit || s.off < 0 || s.off > p.size-s.n || p.data != nil && s.off+s.n > int64(len(p.data)) {
		return packSpan{}, false
	}
	return s, true
}

// read reads an entry from the file.
func (p *pack) read(s packSpan) ([]byte, bool) {
	b := make([]byte, s.n)
	if _, err := p.f.ReadAt(b, s.off); err != nil {
		return nil, false
	}
	return b, true
}

// copyMapped copies an entry out of a mapped pack with cp, so that nothing
// refers to the mapping once it is released. A pack cut short after it
// was mapped faults on the pages past its end: that entry is a miss, not
// a crash.
func copyMapped[T any](b []byte, cp func([]byte) T) (out T, ok bool) {
	if catchFault(func() { out = cp(b) }) != nil {
		var zero T
		return zero, false
	}
	return out, true
}

// openRegular opens a regular file for reading. A symbolic link, a device
// (/dev/zero), a FIFO or a folder is refused before it is read: the file
// is examined without following links, opened without blocking, and must
// still be the same file once open.
func openRegular(p string) (*os.File, os.FileInfo, error) {
	lst, err := os.Lstat(p)
	if err != nil {
		return nil, nil, err
	}
	if !lst.Mode().IsRegular() {
		return nil, nil, fmt.Errorf("%s: %w", p, errNotRegular)
	}
	f, err := os.OpenFile(p, os.O_RDONLY|syscall.O_NONBLOCK, 0)
	if err != nil {
		return nil, nil, err
	}
	st, err := f.Stat()
	if err != nil {
		f.Close()
		return nil, nil, err
	}
	if !st.Mode().IsRegular() || !os.SameFile(lst, st) {
		f.Close()
		return nil, nil, fmt.Errorf("%s: %w", p, errNotRegular)
	}
	return f, st, nil
}

var errNotRegular = errors.New("not a regular file")

// open opens the cache's packs, newest first, once per run; a pack that
// cannot be used is skipped.
func (c *Cache) open() {
	c.openOnce.Do(func() {
		for _, p := range c.packPaths() {
			if pk, err := openPack(p); err == nil {
				c.packs = append(c.packs, pk)
			}
		}
	})
}

// packPaths lists the cache's pack files, newest first.
func (c *Cache) packPaths() []string {
	ents, err := os.ReadDir(c.Dir)
	if err != nil {
		return nil
	}
	type named struct {
		path string
		mod  int64
	}
	var ps []named
	for _, e := range ents {
		if !strings.HasSuffix(e.Name(), packSuffix) || strings.HasPrefix(e.Name(), ".") {
			continue
		}
		var mod int64
		if info, err := e.Info(); err == nil {
			mod = info.ModTime().UnixNano()
		}
		ps = append(ps, named{filepath.Join(c.Dir, e.Name()), mod})
	}
	sort.SliceStable(ps, func(i, j int) bool { return ps[i].mod > ps[j].mod })
	out := make([]string, len(ps))
	for i, p := range ps {
		out[i] = p.path
	}
	return out
}

// lookup finds an entry among this run's and then in the packs, newest
// first.
func (c *Cache) lookup(k packKey, limit int64) ([]byte, bool) {
	c.mu.Lock()
	b, ok := c.pending[k]
	c.mu.Unlock()
	if ok {
		return b, true
	}
	c.open()
	for _, p := range c.packs {
		if b, ok := p.get(k, limit); ok {
			return b, true
		}
	}
	return nil, false
}

// lookupString is lookup for an entry read as text (the figures).
func (c *Cache) lookupString(k packKey, limit int64) (string, bool) {
	c.mu.Lock()
	b, ok := c.pending[k]
	c.mu.Unlock()
	if ok {
		return string(b), true
	}
	c.open()
	for _, p := range c.packs {
		if s, ok := p.getString(k, limit); ok {
			return s, true
		}
	}
	return "", false
}

// Flush writes the entries of this run as one new pack, and merges the
// packs into one when there are more than maxPacks; errors are ignored
// because the cache only saves time.
func (c *Cache) Flush() {
	if c == nil {
		return
	}
	c.mu.Lock()
	pending := c.pending
	c.pending = nil
	c.mu.Unlock()
	if len(pending) == 0 {
		return
	}
	c.open()
	p, err := writePack(c.Dir, pending)
	if err != nil {
		return
	}
	paths := c.packPaths()
	if len(paths) <= maxPacks {
		if pk, err := openPack(p); err == nil {
			c.packs = append([]*pack{pk}, c.packs...)
		}
		return
	}
	// Merge: the newest copy of each key whose entry is current (made by
	// this analyzer version and entry format for that very key: entries
	// of earlier versions are never read again, and would otherwise be
	// carried from merge to merge for ever). The merged pack is written
	// entry by entry from the packs, not gathered in memory first.
	var packs []*pack
	defer func() {
		for _, pk := range packs {
			pk.close()
		}
	}()
	from := map[packKey]*pack{}
	var keys []packKey
	for _, path := range paths {
		pk, err := openPack(path)
		if err != nil {
			continue
		}
		packs = append(packs, pk)
		for _, k := range pk.keys {
			if _, seen := from[k]; seen || len(keys) >= maxPackEntries {
				continue
			}
			if b, ok := pk.get(k, entryLimit(k)); ok && entryCurrent(k, b) {
				from[k] = pk
				keys = append(keys, k)
			}
		}
	}
	if _, err := writePackFrom(c.Dir, keys, func(k packKey) ([]byte, bool) { return from[k].get(k, entryLimit(k)) }); err != nil {
		return
	}
	// The merged packs go; a run that has one open keeps reading it.
	for _, old := range paths {
		os.Remove(old)
	}
	c.release()
	c.openOnce = sync.Once{}
}

// Close writes what the run measured (Flush) and releases the packs the
// cache holds open.
func (c *Cache) Close() {
	if c == nil {
		return
	}
	c.Flush()
	c.release()
}

func (c *Cache) release() {
	for _, p := range c.packs {
		p.close()
	}
	c.packs = nil
}

// writePack writes entries as a new pack in dir and returns its path.
func writePack(dir string, entries map[packKey][]byte) (string, error) {
	keys := make([]packKey, 0, len(entries))
	for k := range entries {
		keys = append(keys, k)
	}
	return writePackFrom(dir, keys, func(k packKey) ([]byte, bool) { return entries[k], true })
}

// writePackFrom writes a pack of the entries of keys (distinct), read one
// at a time by get, twice: once for the index's lengths, once to write
// them; an entry that cannot be read, or reads differently the second
// time, fails the write and nothing is left behind.
func writePackFrom(dir string, keys []packKey, get func(packKey) ([]byte, bool)) (string, error) {
	slices.SortFunc(keys, func(a, b packKey) int { return bytes.Compare(a[:], b[:]) })
	lengths := make([]int, len(keys))
	var head bytes.Buffer
	head.WriteString(packMagic)
	binary.Write(&head, binary.LittleEndian, uint32(len(keys)))
	off := int64(head.Len()) + int64(len(keys))*packRecordLen
	for i, k := range keys {
		b, ok := get(k)
		if !ok {
			return "", fmt.Errorf("cache entry %x cannot be read", k)
		}
		lengths[i] = len(b)
		head.Write(k[:])
		binary.Write(&head, binary.LittleEndian, uint64(off))
		binary.Write(&head, binary.LittleEndian, uint32(len(b)))
		off += int64(len(b))
	}
	if err := os.MkdirAll(dir, 0o755); err != nil {
		return "", err
	}
	tmp, err := os.CreateTemp(dir, ".tmp-*")
	if err != nil {
		return "", err
	}
	w := bufio.NewWriterSize(tmp, 1<<16)
	w.Write(head.Bytes())
	for i, k := range keys {
		b, ok := get(k)
		if !ok || len(b) != lengths[i] {
			err = fmt.Errorf("cache entry %x changed while a pack was written", k)
			break
		}
		w.Write(b)
	}
	if ferr := w.Flush(); err == nil {
		err = ferr
	}
	if cerr := tmp.Close(); err == nil {
		err = cerr
	}
	var id [12]byte
	rand.Read(id[:])
	p := filepath.Join(dir, "pack-"+hex.EncodeToString(id[:])+packSuffix)
	if err == nil {
		err = os.Rename(tmp.Name(), p)
	}
	if err != nil {
		os.Remove(tmp.Name())
		return "", err
	}
	return p, nil
}
