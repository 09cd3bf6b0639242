package budget

import (
	"bytes"
	"errors"
	"fmt"
	"io"
	"maps"
	"math"
	"regexp"
	"slices"
	"sort"
	"strconv"
	"strings"
	"time"
	"unicode/utf8"

	"github.com/bmatcuk/doublestar/v4"
	"github.com/loadline/loadline/internal/regular"
	"go.yaml.in/yaml/v3"
)

// MaxFileSize is the largest budget file Parse and Load accept. A budget
// for hundreds of models fits in a few KiB; anything near this is not a
// budget file.
const MaxFileSize = 1 << 20

// maxNodes bounds the YAML nodes visited while decoding, counting each
// visit through an alias again, so that a small file of nested aliases
// cannot make the decoder do unbounded work.
const maxNodes = 200_000

// maxErrors bounds the errors collected from one file.
const maxErrors = 50

// Weights placements: where a device keeps model weights at run time.
const (
	WeightsFlash = "flash"
	WeightsRAM   = "ram"
)

// File is a decoded, validated budget file.
type File struct {
	Name    string // as given to Parse: the name errors and messages print
	Version int
	Devices map[string]*Device
	Rules   []*Rule
	Waivers []Waiver
}

// Device is one entry of devices: its capacities and where it keeps
// weights.
type Device struct {
	Name string
	// RAM and Flash are the capacities in bytes; nil when not given.
	RAM, Flash *Quantity
	// Weights is where the runtime keeps weights: WeightsFlash (the
	// default) or WeightsRAM.
	Weights string
	// Target is the device's cost-model target as written: a built-in
	// name ("m4-reference@120MHz") or a mapping; nil when the device names
	// none. Package target reads it (target.FromYAML); the budget only
	// keeps it, with its place.
	Target *yaml.Node
	// What the firmware runs together (devices.go): the models, how it
	// runs them (RunsOneAtATime, the default, or RunsConcurrent), whether
	// identical weights are linked once, and limits on the totals.
	Models        []DeviceModel
	Runs          string
	SharedWeights bool
	Limits        map[string]Setting
	Line, Column  int
}

// Capacity returns the device's capacity for a metric (ram or flash).
func (d *Device) Capacity(metric string) (int64, bool) {
	if d == nil {
		return 0, false
	}
	var q *Quantity
	switch metric {
	case MetricRAM:
		q = d.RAM
	case MetricFlash:
		q = d.Flash
	}
	if q == nil {
		return 0, false
	}
	return q.Value, true
}

// Rule is one entry of models: the models its path glob matches, their
// device, the values of their symbolic dims, and what they may use and
// how fast they may grow.
type Rule struct {
	Index  int    // position in models, from 0
	Path   string // doublestar glob from the repository root ("models/**/*.onnx")
	Device string
	Dims   map[string]int64
	// Bindings are the rule's dims: and inputs: entries in file order,
	// each with its place, what check hands to measuring.
	Bindings []Binding
	Limits   map[string]Setting
	Growth   map[string]Setting
	// WarnAt is the share of a limit, in millionths, past which a figure
	// warns; 900000 (90%) when the rule does not say. WarnAtSet tells
	// whether it did.
	WarnAt       int64
	WarnAtSet    bool
	Line, Column int
}

// Binding is one entry of a rule's dims: (Kind "dim": a symbolic dim's
// size) or inputs: (Kind "shape": an input's whole shape, or "value": a
// small input's contents), with its place in the file.
type Binding struct {
	Kind         string
	Name         string
	Dim          int64
	Shape        []int64
	Value        []float64
	Key          string // "models[0].inputs.audio"
	Line, Column int
}

// Place prints where the binding is written: "loadline.yaml:12:11:
// models[0].dims.batch".
func (b Binding) Place(file string) string {
	return fmt.Sprintf("%s:%d:%d: %s", file, b.Line, b.Column, b.Key)
}

// Setting is one limit or growth entry with its place in the file.
type Setting struct {
	Quantity
	Line, Column int
}

// Key returns the key path of the rule ("models[2]").
func (r *Rule) Key() string { return fmt.Sprintf("models[%d]", r.Index) }

// DefaultWarnAt is warn_at when a rule does not set it: 90%.
const DefaultWarnAt = 900_000

var (
	topKeys    = []string{"version", "devices", "models", "waivers"}
	deviceKeys = []string{"ram", "flash", "weights", "target", "runs", "models", "shared_weights", "limits"}
	ruleKeys   = []string{"path", "device", "dims", "inputs", "limits", "growth", "warn_at"}
	waiverKeys = []string{"path", "metric", "excuses", "up_to", "until", "reason"}
	// waiverNeeds are the keys every waiver must have.
	waiverNeeds = []string{"path", "metric", "until", "reason"}
	checkKinds  = []string{"limit", "growth"}
	placements  = []string{WeightsFlash, WeightsRAM}
)

// Load reads and parses a budget file. Files larger than MaxFileSize are
// refused without being read whole.
func Load(path string) (*File, error) {
	f, _, err := regular.Open(path) // a FIFO or device would block or never end
	if err != nil {
		return nil, err
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxFileSize+1))
	if err != nil {
		return nil, fmt.Errorf("%s: %w", path, err)
	}
	if len(data) > MaxFileSize {
		size := int64(len(data))
		if st, err := f.Stat(); err == nil {
			size = st.Size()
		}
		return nil, Errors{tooLarge(path, size)}
	}
	return Parse(path, data)
}

func tooLarge(name string, size int64) *Error {
	return &Error{File: name, Msg: fmt.Sprintf("file is %s; a budget file may be at most %s", FormatBytes(size), FormatBytes(MaxFileSize)),
		Hint: "is this the right file?"}
}

// Parse decodes and validates a budget file's contents; name is the file
// name errors print. On any problem it returns nil and Errors, every
// finding with its line and column.
func Parse(name string, data []byte) (*File, error) {
	if len(data) > MaxFileSize {
		return nil, Errors{tooLarge(name, int64(len(data)))}
	}
	d := &decoder{name: name, nodes: maxNodes}
	root, err := d.document(data)
	if err != nil {
		return nil, Errors{err}
	}
	f := d.file(root)
	if len(d.errs) > 0 {
		// Devices are decoded before models whatever their order in the
		// file: print the errors in file order, the stop notice last.
		errs := d.errs
		if d.tooMany {
			errs = errs[:len(errs)-1]
		}
		sort.SliceStable(errs, func(i, j int) bool {
			a, b := errs[i], errs[j]
			return a.Line < b.Line || a.Line == b.Line && a.Column < b.Column
		})
		return nil, d.errs
	}
	return f, nil
}

var yamlLine = regexp.MustCompile(`^yaml: line (\d+): (.*)$`)

// parserProblems are yaml.v3's parser errors, which it places on the line
// where the unfinished construct starts, with a hint at the usual cause.
var parserProblems = map[string]string{
	"did not find expected ',' or '}'":    "is a { } mapping starting on this line left open?",
	"did not find expected ',' or ']'":    "is a [ ] list starting on this line left open?",
	"did not find expected '-' indicator": "check the indentation of the list starting on this line",
	"did not find expected key":           "check the indentation of the mapping starting on this line",
	"did not find expected node content":  "a value is missing",
	"found undefined tag handle":          "",
}

// document reads the single YAML document of a budget file.
func (d *decoder) document(data []byte) (*yaml.Node, *Error) {
	if line, col, msg, bad := badChar(data); bad {
		return nil, &Error{File: d.name, Line: line, Column: col, Msg: msg, Hint: "a budget file is UTF-8 text: remove it"}
	}
	dec := yaml.NewDecoder(bytes.NewReader(data))
	var doc yaml.Node
	if err := dec.Decode(&doc); err != nil {
		if errors.Is(err, io.EOF) {
			return nil, &Error{File: d.name, Msg: "empty budget file", Hint: "start with version: 1"}
		}
		return nil, d.yamlError(err, data)
	}
	var extra yaml.Node
	if err := dec.Decode(&extra); err == nil {
		return nil, &Error{File: d.name, Line: extra.Line, Column: extra.Column,
			Msg: "a second YAML document; a budget file holds one", Hint: "remove the ---"}
	} else if !errors.Is(err, io.EOF) {
		return nil, d.yamlError(err, data)
	}
	if doc.Kind != yaml.DocumentNode || len(doc.Content) == 0 {
		return nil, &Error{File: d.name, Msg: "empty budget file", Hint: "start with version: 1"}
	}
	return doc.Content[0], nil
}

func (d *decoder) yamlError(err error, data []byte) *Error {
	msg := err.Error()
	if m := yamlLine.FindStringSubmatch(msg); m != nil {
		line, _ := strconv.Atoi(m[1])
		if col := tabColumn(data, line); col > 0 && strings.HasPrefix(m[2], "found character that cannot start any token") {
			// YAML forbids tabs in indentation; the parser's words do not
			// say that a tab is the character it means.
			return &Error{File: d.name, Line: line, Column: col, Msg: "a tab: YAML indents with spaces only",
				Hint: "replace the tab with spaces"}
		}
		hint, parser := parserProblems[m[2]]
		if parser {
			// yaml.v3 reports a parser (not scanner) error at the 0-based
			// line of the construct being parsed: make it 1-based.
			line++
		}
		return &Error{File: d.name, Line: line, Column: problemColumn(data, line, m[2]), Msg: "not valid YAML: " + m[2], Hint: hint}
	}
	problem := strings.TrimPrefix(msg, "yaml: ")
	e := &Error{File: d.name, Msg: "not valid YAML: " + problem}
	switch a := yamlAnchor.FindStringSubmatch(problem); {
	case a != nil:
		// yaml.v3 gives no place for an alias: the first "*name" in the
		// file is it.
		e.Line, e.Column = find(data, "*"+a[1]+a[2])
	case problem == "document contains excessive aliasing":
		e.Line, e.Column = find(data, "*")
	}
	if e.Line == 0 {
		// yaml.v3 leaves out the line of a scanner or parser error on
		// the first line (its 0-based line 0).
		e.Line, e.Column = 1, problemColumn(data, 1, problem)
	}
	return e
}

var yamlAnchor = regexp.MustCompile(`^(?:unknown anchor '([^']*)' referenced|anchor '([^']*)' value contains itself)$`)

// problemColumn places a YAML error that yaml.v3 gives only a line for:
// on the character the scanner stopped at where its words say which
// (a reserved indicator, an unknown escape, a ':' out of place) or on the
// opening of the construct left unfinished ('{', '[', '-'), else on the
// first character of the line, where the construct it names starts.
// Columns count characters, as yaml.v3's do, from 1.
func problemColumn(data []byte, line int, problem string) int {
	lines := bytes.Split(data, []byte("\n"))
	if line < 1 || line > len(lines) {
		return 1
	}
	text := string(lines[line-1])
	at := -1
	switch {
	case strings.HasPrefix(problem, "found character that cannot start any token"):
		at = strings.IndexAny(text, "@`")
	case strings.HasPrefix(problem, "found unknown escape character"):
		for i := 0; i+1 < len(text); i++ {
			if text[i] == '\\' {
				if !strings.ContainsRune("0abtnvfre \"/\\N_LPxuU\t", rune(text[i+1])) {
					at = i
					break
				}
				i++
			}
		}
	case problem == "did not find expected ',' or '}'":
		at = strings.IndexByte(text, '{')
	case problem == "did not find expected ',' or ']'":
		at = strings.IndexByte(text, '[')
	case problem == "did not find expected '-' indicator":
		at = strings.IndexByte(text, '-')
	case strings.HasPrefix(problem, "mapping values are not allowed"):
		if i := strings.Index(text, ": "); i >= 0 {
			at = i
		} else if strings.HasSuffix(text, ":") {
			at = len(text) - 1
		}
	}
	if at < 0 {
		at = len(text) - len(strings.TrimLeft(text, " "))
	}
	return utf8.RuneCountInString(text[:at]) + 1
}

// find returns the 1-based line and column (in characters) of the first
// occurrence of s in data; 0, 0 when there is none.
func find(data []byte, s string) (line, col int) {
	i := bytes.Index(data, []byte(s))
	if i < 0 {
		return 0, 0
	}
	before := data[:i]
	line = bytes.Count(before, []byte("\n")) + 1
	start := bytes.LastIndexByte(before, '\n') + 1
	return line, utf8.RuneCount(before[start:]) + 1
}

// badChar finds the first character a YAML stream may not hold, with its
// 1-based line and column in characters: invalid UTF-8, and any character
// outside YAML's printable set (YAML 1.2.2, 5.1 Character Set, c-printable:
// tab, LF, CR, U+0020-U+007E, U+0085, U+00A0-U+D7FF, U+E000-U+FFFD,
// U+10000 and above), a NUL byte among them. yaml.v3 names no place for
// these.
func badChar(data []byte) (line, col int, msg string, bad bool) {
	line, col = 1, 1
	for i := 0; i < len(data); {
		r, n := utf8.DecodeRune(data[i:])
		switch {
		case r == utf8.RuneError && n <= 1:
			return line, col, fmt.Sprintf("invalid UTF-8 (byte 0x%02x)", data[i]), true
		case r == 0:
			return line, col, "a NUL byte", true
		case !yamlPrintable(r):
			return line, col, fmt.Sprintf("control character %U, which YAML does not allow", r), true
		}
		if r == '\n' {
			line, col = line+1, 1
		} else {
			col++
		}
		i += n
	}
	return 0, 0, "", false
}

func yamlPrintable(r rune) bool {
	switch {
	case r == '\t' || r == '\n' || r == '\r' || r == 0x85:
		return true
	case r >= 0x20 && r <= 0x7E, r >= 0xA0 && r <= 0xD7FF, r >= 0xE000 && r <= 0xFFFD, r >= 0x10000 && r <= 0x10FFFF:
		return true
	}
	return false
}

// tabColumn returns the 1-based column of the first tab on a 1-based line
// of data, 0 when the line has none.
func tabColumn(data []byte, line int) int {
	lines := bytes.Split(data, []byte("\n"))
	if line < 1 || line > len(lines) {
		return 0
	}
	return bytes.IndexByte(lines[line-1], '\t') + 1
}

// decoder walks the YAML node tree, collecting errors.
type decoder struct {
	name    string
	errs    Errors
	nodes   int // node visits left
	stopped bool
	tooMany bool // the last error says decoding stopped at maxErrors
	// badCapacity names devices whose capacity had an error, so that a %
	// limit on them is not reported a second time.
	badCapacity map[string]bool
}

func (d *decoder) add(n *yaml.Node, key, msg, hint string) {
	if d.stopped {
		return
	}
	if len(d.errs) >= maxErrors {
		d.errs = append(d.errs, &Error{File: d.name, Msg: fmt.Sprintf("more than %d errors; stopping", maxErrors)})
		d.stopped, d.tooMany = true, true
		return
	}
	e := &Error{File: d.name, Key: key, Msg: msg, Hint: hint}
	if n != nil {
		e.Line, e.Column = n.Line, n.Column
	}
	d.errs = append(d.errs, e)
}

// visit follows an alias and charges one node visit; it returns nil once
// the budget of visits is spent or decoding has stopped.
func (d *decoder) visit(n *yaml.Node) *yaml.Node {
	if d.stopped || n == nil {
		return nil
	}
	d.nodes--
	if d.nodes < 0 {
		d.add(n, "", fmt.Sprintf("more than %d YAML nodes after expanding aliases", maxNodes), "is the file built from nested aliases?")
		d.stopped = true
		return nil
	}
	for i := 0; n.Kind == yaml.AliasNode && i < 8; i++ {
		if n.Alias == nil {
			return nil
		}
		n = n.Alias
	}
	if n.Kind == yaml.AliasNode {
		return nil
	}
	return n
}

// entry is one key and value of a mapping; k and v are the nodes as
// written (v may be an alias), for their places.
type entry struct {
	name string
	k, v *yaml.Node
}

// mapping returns a mapping's entries in order, with merge keys (<<)
// applied: explicit keys win over merged ones, earlier merges over later.
// Duplicate explicit keys and non-scalar keys are errors. ok is false
// when n is not a mapping.
func (d *decoder) mapping(n *yaml.Node, key string) ([]entry, bool) {
	m := d.visit(n)
	if m == nil {
		return nil, false
	}
	if m.Kind != yaml.MappingNode {
		if m.Kind == yaml.ScalarNode && m.Tag == "!!null" {
			return nil, true // "limits:" with nothing after it: empty
		}
		d.add(n, key, "want a mapping of keys to values, found "+describe(m), "")
		return nil, false
	}
	var out []entry
	seen := map[string]*yaml.Node{}
	d.collect(m, key, &out, seen, true, 0)
	return out, true
}

func (d *decoder) collect(m *yaml.Node, key string, out *[]entry, seen map[string]*yaml.Node, explicit bool, depth int) {
	var merges []*yaml.Node
	for i := 0; i+1 < len(m.Content) && !d.stopped; i += 2 {
		kn, vn := m.Content[i], m.Content[i+1]
		k := d.visit(kn)
		if k == nil {
			return
		}
		if k.Kind == yaml.ScalarNode && k.Tag == "!!merge" {
			merges = append(merges, vn)
			continue
		}
		if k.Kind != yaml.ScalarNode {
			d.add(kn, key, "a key must be a plain name, found "+describe(k), "")
			continue
		}
		if first, dup := seen[k.Value]; dup {
			if explicit {
				d.add(kn, key, fmt.Sprintf("duplicate key %q (first at %d:%d)", k.Value, first.Line, first.Column), "")
			}
			continue
		}
		seen[k.Value] = kn
		*out = append(*out, entry{name: k.Value, k: kn, v: vn})
	}
	for _, mn := range merges {
		if depth >= 8 {
			d.add(mn, key, "merges nested too deep", "")
			return
		}
		src := d.visit(mn)
		if src == nil {
			return
		}
		var srcs []*yaml.Node
		switch src.Kind {
		case yaml.MappingNode:
			srcs = []*yaml.Node{src}
		case yaml.SequenceNode:
			for _, s := range src.Content {
				if s = d.visit(s); s == nil {
					return
				}
				srcs = append(srcs, s)
			}
		}
		for _, s := range srcs {
			if s.Kind != yaml.MappingNode {
				d.add(mn, key, "<< merges a mapping or a list of mappings, found "+describe(s), "")
				continue
			}
			d.collect(s, key, out, seen, false, depth+1)
		}
	}
}

// sequence returns a sequence's items as written. ok is false when n is
// not a sequence.
func (d *decoder) sequence(n *yaml.Node, key string) ([]*yaml.Node, bool) {
	s := d.visit(n)
	if s == nil {
		return nil, false
	}
	if s.Kind != yaml.SequenceNode {
		if s.Kind == yaml.ScalarNode && s.Tag == "!!null" {
			return nil, true
		}
		d.add(n, key, "want a list, found "+describe(s), "write each entry on a line starting with -")
		return nil, false
	}
	return s.Content, true
}

// scalar returns a scalar's text. Nulls, booleans and collections are
// errors.
func (d *decoder) scalar(n *yaml.Node, key string) (string, bool) {
	s := d.visit(n)
	if s == nil {
		return "", false
	}
	if s.Kind != yaml.ScalarNode {
		d.add(n, key, "want a value, found "+describe(s), "")
		return "", false
	}
	switch s.Tag {
	case "!!null":
		d.add(n, key, "missing value", "")
		return "", false
	case "!!bool":
		d.add(n, key, fmt.Sprintf("%q reads as a yes/no; want a value", s.Value), "quote it if you mean the text")
		return "", false
	}
	return s.Value, true
}

func describe(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		if n.Tag == "!!null" {
			return "nothing"
		}
		v := n.Value
		if len(v) > 40 {
			v = v[:40] + "…"
		}
		return fmt.Sprintf("%q", v)
	}
	return "something else"
}

func (d *decoder) unknownKey(e entry, key string, known []string) {
	d.add(e.k, key, fmt.Sprintf("unknown key %q", e.name), didYouMean(e.name, known))
}

func sub(key, name string) string {
	if key == "" {
		return name
	}
	return key + "." + name
}

func (d *decoder) file(root *yaml.Node) *File {
	f := &File{Name: d.name, Devices: map[string]*Device{}}
	top, ok := d.mapping(root, "")
	if !ok {
		if len(d.errs) == 0 {
			d.add(root, "", "empty budget file", "start with version: 1")
		}
		return f
	}
	byName := map[string]entry{}
	for _, e := range top {
		if !contains(topKeys, e.name) {
			d.unknownKey(e, "", topKeys)
			continue
		}
		byName[e.name] = e
	}
	if e, ok := byName["version"]; ok {
		if v, ok := d.scalar(e.v, "version"); ok {
			if v != "1" {
				d.add(e.v, "version", fmt.Sprintf("version %q is not one this loadline reads", v), "write version: 1")
			}
			f.Version = 1
		}
	} else {
		d.add(root, "", "missing version", "start the file with version: 1")
	}
	// Devices first, whatever the key order: rules refer to them.
	if e, ok := byName["devices"]; ok {
		d.devices(f, e.v)
	}
	if e, ok := byName["models"]; ok {
		items, _ := d.sequence(e.v, "models")
		for i, item := range items {
			if d.stopped {
				break
			}
			if r := d.rule(f, i, item); r != nil {
				f.Rules = append(f.Rules, r)
			}
		}
	}
	if e, ok := byName["waivers"]; ok {
		items, _ := d.sequence(e.v, "waivers")
		first := map[[2]string]Waiver{}
		for i, item := range items {
			if d.stopped {
				break
			}
			w, ok := d.waiver(i, item)
			if !ok {
				continue
			}
			k := [2]string{w.Path, w.Metric}
			if prev, dup := first[k]; dup {
				d.add(&yaml.Node{Line: w.Line, Column: w.Column}, fmt.Sprintf("waivers[%d]", i), fmt.Sprintf("a second waiver for %s %s (first at %d:%d)", w.Path, w.Metric, prev.Line, prev.Column),
					"keep one, with the date and reason in force")
				continue
			}
			first[k] = w
			f.Waivers = append(f.Waivers, w)
		}
	}
	return f
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

func (d *decoder) devices(f *File, n *yaml.Node) {
	entries, _ := d.mapping(n, "devices")
	for _, e := range entries {
		key := sub("devices", e.name)
		if strings.TrimSpace(e.name) == "" {
			d.add(e.k, "devices", "a device needs a name", "")
			continue
		}
		dev := &Device{Name: e.name, Weights: WeightsFlash, Runs: RunsOneAtATime, Line: e.k.Line, Column: e.k.Column}
		fields, ok := d.mapping(e.v, key)
		if !ok {
			continue
		}
		for _, fe := range fields {
			fkey := sub(key, fe.name)
			switch fe.name {
			case "ram", "flash":
				q, ok := d.quantity(fe.v, fkey)
				if ok && (q.Kind == Percent || q.Kind == Count || q.Value <= 0) {
					ok = false
					d.capacityError(fe, fkey, q)
				}
				if !ok {
					if d.badCapacity == nil {
						d.badCapacity = map[string]bool{}
					}
					d.badCapacity[e.name+"."+fe.name] = true
					continue
				}
				if fe.name == "ram" {
					dev.RAM = &q
				} else {
					dev.Flash = &q
				}
			case "weights":
				v, ok := d.scalar(fe.v, fkey)
				if !ok {
					continue
				}
				if !contains(placements, v) {
					hint := didYouMean(v, placements)
					if hint == "" {
						hint = "write flash or ram"
					}
					d.add(fe.v, fkey, fmt.Sprintf("%q: weights live in flash or ram", v), hint)
					continue
				}
				dev.Weights = v
			case "target":
				if v := d.visit(fe.v); v != nil {
					dev.Target = v
				}
			default:
				if !d.deviceSet(dev, fe, fkey) {
					d.unknownKey(fe, key, deviceKeys)
				}
			}
		}
		d.checkDeviceSet(dev, e.v, key)
		f.Devices[e.name] = dev
	}
}

func (d *decoder) capacityError(fe entry, fkey string, q Quantity) {
	switch {
	case q.Kind == Percent:
		d.add(fe.v, fkey, fmt.Sprintf("%q: a capacity is in bytes, not a share", q.Text), "write e.g. 512KiB")
	case q.Kind == Count:
		d.add(fe.v, fkey, fmt.Sprintf("%q is a count; a capacity is in bytes", q.Text), countAsBytesHint(q.Text))
	default:
		d.add(fe.v, fkey, fmt.Sprintf("%q: a capacity must be more than 0", q.Text), "leave it out if the device has none to budget")
	}
}

func countAsBytesHint(text string) string {
	num := strings.TrimRight(strings.TrimSpace(text), "kMGT ")
	unit := strings.TrimSpace(strings.TrimPrefix(strings.TrimSpace(text), num))
	switch unit {
	case "k":
		return fmt.Sprintf("write %sKB or %sKiB", num, num)
	case "M", "G", "T":
		return fmt.Sprintf("write %s%sB or %s%siB", num, unit, num, unit)
	}
	return "write e.g. 512KiB"
}

func bytesAsCountHint(text string) string {
	s := strings.TrimSpace(text)
	i := 0
	for i < len(s) && (isDigit(s[i]) || s[i] == '.') {
		i++
	}
	num, unit := s[:i], strings.TrimSpace(s[i:])
	if unit == "" || unit == "B" {
		return "write a plain number"
	}
	return fmt.Sprintf("write %s%s", num, map[byte]string{'K': "k", 'k': "k", 'M': "M", 'G': "G", 'T': "T"}[unit[0]])
}

// quantity reads a scalar as a Quantity, reporting a bad unit with its
// place.
func (d *decoder) quantity(n *yaml.Node, key string) (Quantity, bool) {
	v, ok := d.scalar(n, key)
	if !ok {
		return Quantity{}, false
	}
	q, err := ParseQuantity(v)
	if err != nil {
		var qe *QuantityError
		if errors.As(err, &qe) {
			d.add(n, key, fmt.Sprintf("%q: %s", qe.Text, qe.Msg), qe.Hint)
		} else {
			d.add(n, key, err.Error(), "")
		}
		return Quantity{}, false
	}
	return q, true
}

func (d *decoder) rule(f *File, i int, n *yaml.Node) *Rule {
	key := fmt.Sprintf("models[%d]", i)
	entries, ok := d.mapping(n, key)
	if !ok {
		return nil
	}
	r := &Rule{Index: i, WarnAt: DefaultWarnAt, Line: n.Line, Column: n.Column,
		Dims: map[string]int64{}, Limits: map[string]Setting{}, Growth: map[string]Setting{}}
	if m := d.visit(n); m != nil && len(m.Content) > 0 {
		r.Line, r.Column = m.Content[0].Line, m.Content[0].Column
	}
	var limits, growth []entry
	var hasPath, hasDevice bool
	for _, e := range entries {
		ekey := sub(key, e.name)
		switch e.name {
		case "path":
			v, ok := d.scalar(e.v, ekey)
			hasPath = true
			if !ok {
				continue
			}
			if p, msg, hint := checkGlob(v); msg != "" {
				d.add(e.v, ekey, msg, hint)
			} else {
				r.Path = p
			}
		case "device":
			v, ok := d.scalar(e.v, ekey)
			hasDevice = true
			if !ok {
				continue
			}
			if _, known := f.Devices[v]; !known {
				names := deviceNames(f)
				hint := didYouMean(v, names)
				if hint == "" && len(names) > 0 {
					hint = "devices: " + strings.Join(names, ", ")
				} else if hint == "" {
					hint = "define it under devices"
				}
				d.add(e.v, ekey, fmt.Sprintf("unknown device %q", v), hint)
				continue
			}
			r.Device = v
		case "dims":
			dims, _ := d.mapping(e.v, ekey)
			for _, de := range dims {
				v, ok := d.scalar(de.v, sub(ekey, de.name))
				if !ok {
					continue
				}
				n, err := strconv.ParseInt(v, 10, 64)
				if err != nil || n < 1 || n > 1<<40 {
					d.add(de.v, sub(ekey, de.name), fmt.Sprintf("%q: a dim is a whole number from 1 up", v), "")
					continue
				}
				r.Dims[de.name] = n
				r.Bindings = append(r.Bindings, Binding{Kind: "dim", Name: de.name, Dim: n, Key: sub(ekey, de.name), Line: de.k.Line, Column: de.k.Column})
			}
		case "inputs":
			ins, _ := d.mapping(e.v, ekey)
			for _, ie := range ins {
				r.Bindings = append(r.Bindings, d.inputBindings(ie, sub(ekey, ie.name))...)
			}
		case "limits":
			limits, _ = d.mapping(e.v, ekey)
		case "growth":
			growth, _ = d.mapping(e.v, ekey)
		case "warn_at":
			if q, ok := d.warnAt(e.v, ekey); ok {
				r.WarnAt, r.WarnAtSet = q, true
			}
		default:
			d.unknownKey(e, key, ruleKeys)
		}
	}
	if !hasPath {
		d.add(n, key, "missing path", "say which models the rule covers, e.g. path: \"models/**/*.onnx\"")
	}
	if !hasDevice {
		names := deviceNames(f)
		hint := "name one of devices"
		if len(names) > 0 {
			hint = "devices: " + strings.Join(names, ", ")
		}
		d.add(n, key, "missing device", hint)
	}
	dev := f.Devices[r.Device]
	for _, e := range limits {
		if s, ok := d.setting(e, sub(key, "limits"), true, dev); ok {
			r.Limits[e.name] = s
		}
	}
	for _, e := range growth {
		if s, ok := d.setting(e, sub(key, "growth"), false, dev); ok {
			r.Growth[e.name] = s
		}
	}
	if r.Path == "" || r.Device == "" {
		return nil
	}
	return r
}

func deviceNames(f *File) []string {
	names := make([]string, 0, len(f.Devices))
	for n := range f.Devices {
		names = append(names, n)
	}
	sort.Strings(names)
	return names
}

// checkGlob validates a rule or waiver path and returns it as matched.
func checkGlob(p string) (clean, msg, hint string) {
	if strings.TrimSpace(p) == "" {
		return "", "empty path", "write e.g. models/**/*.onnx"
	}
	if strings.HasPrefix(p, "/") {
		return "", fmt.Sprintf("%q: paths are relative to the repository root", p), "drop the leading /"
	}
	if strings.Contains(p, `\`) {
		return "", fmt.Sprintf("%q: write paths with /", p), ""
	}
	p = strings.TrimPrefix(p, "./")
	if !doublestar.ValidatePattern(p) {
		return "", fmt.Sprintf("%q is not a valid glob", p), "check the brackets and braces"
	}
	return p, "", ""
}

// setting reads one limits or growth entry.
func (d *decoder) setting(e entry, key string, limit bool, dev *Device) (Setting, bool) {
	if !contains(Metrics, e.name) {
		d.add(e.k, key, fmt.Sprintf("unknown metric %q", e.name), metricHint(e.name))
		return Setting{}, false
	}
	mkey := sub(key, e.name)
	// A growth allowance may be negative: a required shrink ("-5%": the
	// figure must fall by at least 5 % against the base).
	shrink := false
	if v := e.v; !limit && v.Kind == yaml.ScalarNode && strings.HasPrefix(strings.TrimSpace(v.Value), "-") {
		trimmed := *v
		trimmed.Value = strings.TrimPrefix(strings.TrimSpace(v.Value), "-")
		e.v, shrink = &trimmed, true
	}
	q, ok := d.quantity(e.v, mkey)
	if !ok {
		return Setting{}, false
	}
	if shrink {
		if q.Kind == Percent && q.Value >= PercentScale {
			d.add(e.v, mkey, fmt.Sprintf("\"-%s\": a figure cannot fall by 100%% or more", q.Text), "write a shrink below 100%, e.g. -5%")
			return Setting{}, false
		}
		q.Value, q.Text = -q.Value, "-"+q.Text
	}
	s := Setting{Quantity: q, Line: e.v.Line, Column: e.v.Column}
	switch unit := UnitOf(e.name); {
	case unit == Duration || unit == Energy:
		if q.Kind != unit && q.Kind != Percent {
			example := map[Kind]string{Duration: "250ms or 800us", Energy: "10mJ or 500uJ"}[unit]
			d.add(e.v, mkey, fmt.Sprintf("%q: %s is %s", q.Text, e.name, map[Kind]string{Duration: "a duration", Energy: "an energy"}[unit]), "write e.g. "+example)
			return Setting{}, false
		}
	case q.Kind == Duration || q.Kind == Energy:
		d.add(e.v, mkey, fmt.Sprintf("%q is a %s; %s is %s", q.Text, q.Kind, e.name, map[bool]string{true: "in bytes", false: "a count"}[IsBytes(e.name)]), "")
		return Setting{}, false
	case IsBytes(e.name) && q.Kind == Count:
		d.add(e.v, mkey, fmt.Sprintf("%q is a count; %s is in bytes", q.Text, e.name), countAsBytesHint(q.Text))
		return Setting{}, false
	case !IsBytes(e.name) && q.Kind == Bytes:
		d.add(e.v, mkey, fmt.Sprintf("%q is in bytes; %s is a count", q.Text, e.name), bytesAsCountHint(q.Text))
		return Setting{}, false
	}
	if limit && (e.name == MetricLatency || e.name == MetricEnergy || e.name == MetricUnsupported) && dev != nil && dev.Target == nil {
		d.add(e.k, mkey, fmt.Sprintf("device %q names no target to estimate %s on", dev.Name, e.name),
			fmt.Sprintf("add devices.%s.target, e.g. target: m4-reference@120MHz", dev.Name))
		return Setting{}, false
	}
	if q.Kind != Percent {
		return s, true
	}
	if !limit {
		return s, true // growth: a share of the base figure, any size
	}
	if e.name != MetricRAM && e.name != MetricFlash {
		d.add(e.v, mkey, fmt.Sprintf("%q: a %% limit is a share of the device's capacity, and only ram and flash have one", q.Text),
			"write the limit as a number, e.g. "+map[Kind]string{Bytes: "256KiB", Count: "60M", Duration: "250ms", Energy: "10mJ"}[UnitOf(e.name)])
		return Setting{}, false
	}
	if q.Value <= 0 || q.Value > PercentScale {
		d.add(e.v, mkey, fmt.Sprintf("%q: a share of the device must be more than 0%% and at most 100%%", q.Text), "")
		return Setting{}, false
	}
	if dev == nil {
		return Setting{}, false // the unknown device is reported already
	}
	if _, ok := dev.Capacity(e.name); !ok {
		if d.badCapacity[dev.Name+"."+e.name] {
			return Setting{}, false // its error is reported already
		}
		d.add(e.v, mkey, fmt.Sprintf("%q: device %q has no %s capacity to take a share of", q.Text, dev.Name, e.name),
			fmt.Sprintf("add devices.%s.%s, or write the limit in bytes", dev.Name, e.name))
		return Setting{}, false
	}
	return s, true
}

func metricHint(name string) string {
	if h := didYouMean(name, Metrics); h != "" {
		return h
	}
	switch strings.ToLower(name) {
	case "param_bytes", "parameter_bytes":
		return `did you mean "weights"?`
	case "file_bytes", "size":
		return `did you mean "file"?`
	case "memory", "activations", "peak":
		return `did you mean "arena" or "ram"?`
	}
	return "metrics: " + strings.Join(Metrics, ", ")
}

// warnAt reads warn_at: a percent, more than 0 and at most 100.
func (d *decoder) warnAt(n *yaml.Node, key string) (int64, bool) {
	v, ok := d.scalar(n, key)
	if !ok {
		return 0, false
	}
	q, err := ParseQuantity(v)
	if err == nil && q.Kind == Percent {
		if q.Value <= 0 || q.Value > PercentScale {
			d.add(n, key, fmt.Sprintf("%q: warn_at must be more than 0%% and at most 100%%", v), "")
			return 0, false
		}
		return q.Value, true
	}
	hint := "write e.g. 90%"
	if f, err := strconv.ParseFloat(strings.TrimSpace(v), 64); err == nil && f > 0 {
		if f <= 1 {
			hint = "write " + strconv.FormatFloat(f*100, 'f', -1, 64) + "%"
		} else if f <= 100 {
			hint = "write " + strings.TrimSpace(v) + "%"
		}
	}
	d.add(n, key, fmt.Sprintf("%q: warn_at is a percent of the limit", v), hint)
	return 0, false
}

func (d *decoder) waiver(i int, n *yaml.Node) (Waiver, bool) {
	key := fmt.Sprintf("waivers[%d]", i)
	entries, ok := d.mapping(n, key)
	if !ok {
		return Waiver{}, false
	}
	w := Waiver{Line: n.Line, Column: n.Column}
	if m := d.visit(n); m != nil && len(m.Content) > 0 {
		w.Line, w.Column = m.Content[0].Line, m.Content[0].Column
	}
	good := true
	seen := map[string]bool{}
	var upToNode *yaml.Node
	for _, e := range entries {
		ekey := sub(key, e.name)
		if !contains(waiverKeys, e.name) {
			d.unknownKey(e, key, waiverKeys)
			good = false
			continue
		}
		seen[e.name] = true
		if e.name == "excuses" {
			// One kind, or a list of them.
			var items []*yaml.Node
			if e.v.Kind == yaml.SequenceNode {
				items, _ = d.sequence(e.v, ekey)
			} else {
				items = []*yaml.Node{e.v}
			}
			for _, it := range items {
				v, ok := d.scalar(it, ekey)
				if !ok {
					good = false
					continue
				}
				if !contains(checkKinds, v) {
					hint := didYouMean(v, checkKinds)
					if hint == "" {
						hint = "write limit, growth, or [limit, growth]"
					}
					d.add(it, ekey, fmt.Sprintf("%q: a waiver excuses a limit or a growth", v), hint)
					good = false
					continue
				}
				if !contains(w.Excuses, v) {
					w.Excuses = append(w.Excuses, v)
				}
			}
			if len(items) == 0 {
				d.add(e.v, ekey, "excuses nothing", "write limit, growth, or [limit, growth]")
				good = false
			}
			continue
		}
		if e.name == "up_to" {
			q, ok := d.quantity(e.v, ekey)
			if ok && q.Kind == Percent {
				d.add(e.v, ekey, fmt.Sprintf("%q: a ceiling is a figure, not a share", q.Text), "write e.g. 320M or 600KiB")
				ok = false
			}
			if !ok {
				good = false
				continue
			}
			v := q.Value
			w.UpTo, w.UpToText = &v, q.Text
			upToNode = e.v
			continue
		}
		v, ok := d.scalar(e.v, ekey)
		if !ok {
			good = false
			continue
		}
		switch e.name {
		case "path":
			p, msg, hint := checkGlob(v)
			if msg != "" {
				d.add(e.v, ekey, msg, hint)
				good = false
			}
			w.Path = p
		case "metric":
			if !contains(Metrics, v) {
				d.add(e.v, ekey, fmt.Sprintf("unknown metric %q", v), metricHint(v))
				good = false
			}
			w.Metric = v
		case "until":
			t, err := time.Parse("2006-01-02", strings.TrimSpace(v))
			if err != nil {
				d.add(e.v, ekey, fmt.Sprintf("%q is not a date", v), "write YYYY-MM-DD, e.g. 2027-01-31")
				good = false
			}
			w.Until = t
		case "reason":
			if strings.TrimSpace(v) == "" {
				d.add(e.v, ekey, "empty reason", "say why the figure may exceed its budget, for the reviewer who renews it")
				good = false
			}
			w.Reason = strings.TrimSpace(v)
		}
	}
	if len(w.Excuses) == 0 {
		w.Excuses = []string{"limit", "growth"}
	}
	if w.UpTo != nil && contains(Metrics, w.Metric) {
		q, _ := ParseQuantity(w.UpToText)
		switch {
		case IsBytes(w.Metric) && q.Kind == Count:
			d.add(upToNode, sub(key, "up_to"), fmt.Sprintf("%q is a count; %s is in bytes", q.Text, w.Metric), countAsBytesHint(q.Text))
			good = false
		case !IsBytes(w.Metric) && q.Kind == Bytes:
			d.add(upToNode, sub(key, "up_to"), fmt.Sprintf("%q is in bytes; %s is a count", q.Text, w.Metric), bytesAsCountHint(q.Text))
			good = false
		}
	}
	for _, k := range waiverNeeds {
		if !seen[k] {
			hint := map[string]string{
				"path":   "name the model, e.g. path: models/birdcam/v4.onnx",
				"metric": "metrics: " + strings.Join(Metrics, ", "),
				"until":  "a waiver ends: write until: YYYY-MM-DD",
				"reason": "say why the figure may exceed its budget",
			}[k]
			d.add(n, key, "missing "+k, hint)
			good = false
		}
	}
	return w, good
}

// Match returns the rules whose path glob matches a model path, in file
// order. Paths are relative to the repository root, with /.
func (f *File) Match(p string) []*Rule {
	p = cleanPath(p)
	var out []*Rule
	for _, r := range f.Rules {
		if ok, _ := doublestar.Match(r.Path, p); ok {
			out = append(out, r)
		}
	}
	return out
}

// Dims returns the values of symbolic dims for a model path, from every
// rule that matches it; an error when two rules give one dim different
// values.
func (f *File) Dims(p string) (map[string]int64, error) {
	out := map[string]int64{}
	from := map[string]*Rule{}
	for _, r := range f.Match(p) {
		for _, name := range slices.Sorted(maps.Keys(r.Dims)) {
			v := r.Dims[name]
			if first, ok := from[name]; ok && out[name] != v {
				return nil, fmt.Errorf("%s: rules disagree on dim %s: %s says %d, %s says %d",
					cleanPath(p), name, f.ruleAt(first), out[name], f.ruleAt(r), v)
			} else if !ok {
				out[name], from[name] = v, r
			}
		}
	}
	return out, nil
}

func (f *File) place(line, col int) string {
	return fmt.Sprintf("%s:%d:%d", f.Name, line, col)
}

// ruleAt names a rule for a message: models[2] "models/**" (loadline.yaml:14:5).
func (f *File) ruleAt(r *Rule) string {
	return fmt.Sprintf("%s %q (%s)", r.Key(), r.Path, f.place(r.Line, r.Column))
}

func cleanPath(p string) string {
	return strings.TrimPrefix(strings.ReplaceAll(p, `\`, "/"), "./")
}

// Bounds of an inputs: entry.
const (
	maxBoundSize   = 1 << 40
	maxBoundValues = 1 << 16
)

// inputBindings reads one inputs: entry: a sequence is the input's shape
// ([1, 512]), a number its value (16000), and a mapping spells both out
// ({shape: [1, 512]}, {value: 16000}, {value: [1, 2]}).
func (d *decoder) inputBindings(e entry, key string) []Binding {
	at := func(kind string) Binding {
		return Binding{Kind: kind, Name: e.name, Key: key, Line: e.k.Line, Column: e.k.Column}
	}
	n := d.visit(e.v)
	if n == nil {
		return nil
	}
	switch n.Kind {
	case yaml.SequenceNode:
		if s, ok := d.sizes(n, key); ok {
			b := at("shape")
			b.Shape = s
			return []Binding{b}
		}
	case yaml.ScalarNode:
		if v, ok := d.numbers(n, key); ok {
			b := at("value")
			b.Value = v
			return []Binding{b}
		}
	case yaml.MappingNode:
		fields, _ := d.mapping(n, key)
		var out []Binding
		for _, f := range fields {
			fkey := sub(key, f.name)
			switch f.name {
			case "shape":
				fv := d.visit(f.v)
				if fv == nil || fv.Kind != yaml.SequenceNode {
					d.add(f.v, fkey, "want a list of sizes, e.g. [1, 512]", "")
					continue
				}
				if s, ok := d.sizes(fv, fkey); ok {
					b := at("shape")
					b.Shape, b.Key, b.Line, b.Column = s, fkey, f.k.Line, f.k.Column
					out = append(out, b)
				}
			case "value":
				if v, ok := d.numbers(f.v, fkey); ok {
					b := at("value")
					b.Value, b.Key, b.Line, b.Column = v, fkey, f.k.Line, f.k.Column
					out = append(out, b)
				}
			default:
				d.unknownKey(f, key, []string{"shape", "value"})
			}
		}
		return out
	default:
		d.add(e.v, key, "want a shape ([1, 512]), a value (16000) or {shape: …, value: …}, found "+describe(n), "")
	}
	return nil
}

// sizes reads a sequence of whole numbers from 1 up.
func (d *decoder) sizes(n *yaml.Node, key string) ([]int64, bool) {
	if len(n.Content) > 64 {
		d.add(n, key, fmt.Sprintf("%d dims; a shape may have at most 64", len(n.Content)), "")
		return nil, false
	}
	out := make([]int64, 0, len(n.Content))
	for i, c := range n.Content {
		v, ok := d.scalar(c, fmt.Sprintf("%s[%d]", key, i))
		if !ok {
			return nil, false
		}
		x, err := strconv.ParseInt(v, 10, 64)
		if err != nil || x < 1 || x > maxBoundSize {
			d.add(c, fmt.Sprintf("%s[%d]", key, i), fmt.Sprintf("%q: a size is a whole number from 1 up", v), "")
			return nil, false
		}
		out = append(out, x)
	}
	return out, true
}

// numbers reads a number or a sequence of numbers.
func (d *decoder) numbers(n *yaml.Node, key string) ([]float64, bool) {
	n = d.visit(n)
	if n == nil {
		return nil, false
	}
	items := []*yaml.Node{n}
	if n.Kind == yaml.SequenceNode {
		items = n.Content
		if len(items) > maxBoundValues {
			d.add(n, key, fmt.Sprintf("%d values; a value binding may hold at most %d", len(items), maxBoundValues), "")
			return nil, false
		}
	}
	out := make([]float64, 0, len(items))
	for i, c := range items {
		ikey := key
		if n.Kind == yaml.SequenceNode {
			ikey = fmt.Sprintf("%s[%d]", key, i)
		}
		v, ok := d.scalar(c, ikey)
		if !ok {
			return nil, false
		}
		x, err := strconv.ParseFloat(v, 64)
		if err != nil || math.IsNaN(x) || math.IsInf(x, 0) {
			d.add(c, ikey, fmt.Sprintf("%q: want a number", v), "")
			return nil, false
		}
		out = append(out, x)
	}
	return out, true
}

// Bindings returns the dims: and inputs: entries of every rule matching a
// model path, the first rule's where two name the same dim or input; an
// error when two rules disagree.
func (f *File) Bindings(p string) ([]Binding, error) {
	var out []Binding
	first := map[string]int{}
	for _, r := range f.Match(p) {
		for _, b := range r.Bindings {
			k := b.Kind + "\x00" + b.Name
			if j, ok := first[k]; ok {
				o := out[j]
				if o.Dim != b.Dim || fmt.Sprint(o.Shape) != fmt.Sprint(b.Shape) || fmt.Sprint(o.Value) != fmt.Sprint(b.Value) {
					return out, fmt.Errorf("%s: rules disagree on %s %s: %s and %s", cleanPath(p), b.Kind, b.Name, o.Place(f.Name), b.Place(f.Name))
				}
				continue
			}
			first[k] = len(out)
			out = append(out, b)
		}
	}
	return out, nil
}
