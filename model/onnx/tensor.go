package onnx

import (
	"errors"
	"fmt"
	"io"
	"io/fs"
	"math"
	"path"
	"path/filepath"
	"strconv"
	"strings"

	"github.com/loadline/loadline/internal/regular"
	"github.com/loadline/loadline/model"
	"google.golang.org/protobuf/encoding/protowire"
)

// typedFields describes TensorProto's typed repeated fields.
var typedFields = map[protowire.Number]struct {
	name  string
	enc   model.Encoding
	fixed int // bytes per entry; 0 for varints
}{
	4:  {"float_data", model.EncodingFloat32s, 4},
	5:  {"int32_data", model.EncodingInt32s, 0},
	7:  {"int64_data", model.EncodingInt64s, 0},
	10: {"double_data", model.EncodingFloat64s, 8},
	11: {"uint64_data", model.EncodingUint64s, 0},
}

// typedFieldFor is the typed field onnx.proto says holds values of dt.
func typedFieldFor(dt model.DType) model.Encoding {
	switch dt {
	case model.Float32, model.Complex64:
		return model.EncodingFloat32s
	case model.Float64, model.Complex128:
		return model.EncodingFloat64s
	case model.Int64:
		return model.EncodingInt64s
	case model.Uint32, model.Uint64:
		return model.EncodingUint64s
	case model.String:
		return model.EncodingStrings
	}
	return model.EncodingInt32s
}

func encodingField(e model.Encoding) string {
	switch e {
	case model.EncodingRaw:
		return "raw_data"
	case model.EncodingStrings:
		return "string_data"
	case model.EncodingExternal:
		return "external_data"
	}
	for _, tf := range typedFields {
		if tf.enc == e {
			return tf.name
		}
	}
	return "no data"
}

// tensorParts collects a TensorProto's fields before they are checked.
type tensorParts struct {
	dtype    int32
	dtypeOff int
	enc      model.Encoding // the typed field or string_data in use
	encOff   int
	entries  int64 // values in the typed field or string_data
	segs     [][]byte
	raw      []byte
	rawSeen  bool
	rawOff   int
	location int32
	locOff   int
	ext      map[string]string
	extOff   int
	negDim   int // index of the first negative dim, or -1
	negOff   int
}

// TensorProto; off is the offset of the field that holds it.
func (d *decoder) tensor(lo, hi, off int) (*model.Tensor, error) {
	t := d.tensors.one()
	p := tensorParts{negDim: -1}
	p.dtypeOff, p.encOff, p.rawOff, p.locOff, p.extOff = off, off, off, off, off
	r := d.reader(lo, hi)
	r.names = tensorFields
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			break
		}
		switch f.num {
		case 1:
			start := len(t.Dims)
			t.Dims, err = d.appendInt64s(t.Dims, &f, "")
			err = withinAt(err, "dims", start)
			for i := start; err == nil && i < len(t.Dims) && p.negDim < 0; i++ {
				if t.Dims[i] < 0 {
					p.negDim, p.negOff = i, f.off // reported once the name is known
				}
			}
		case 2:
			p.dtype, err = d.int32(&f, "data_type")
			p.dtypeOff = f.off
		case 3:
			if err = d.skipBytes(&f, "segment"); err == nil {
				err = &DecodeError{Path: d.path, Field: "segment", Offset: f.off,
					Err: fmt.Errorf("tensors split into segments (TensorProto.segment) are not supported")}
			}
		case 4, 5, 7, 10, 11:
			err = d.typedValues(&f, &p)
		case 6:
			if err = d.skipBytes(&f, indexed("string_data", int(p.entries))); err == nil {
				err = d.useEncoding(&f, &p, model.EncodingStrings)
				p.segs = append(p.segs, d.payload(&f))
				p.entries++
			}
		case 8:
			t.Name, err = d.str(&f, "name")
		case 9:
			if err = d.skipBytes(&f, "raw_data"); err == nil {
				p.raw, p.rawSeen, p.rawOff = d.payload(&f), true, f.off
			}
		case 12:
			err = d.skipBytes(&f, "doc_string")
		case 13:
			name := indexed("external_data", len(p.ext))
			if err = d.msg(&f, name); err == nil {
				var k, v string
				k, v, err = d.stringPair(f.lo, f.hi)
				if p.ext == nil {
					p.ext, p.extOff = map[string]string{}, f.off
				}
				p.ext[k] = v
				err = within(err, name)
			}
		case 14:
			p.location, err = d.int32(&f, "data_location")
			p.locOff = f.off
		}
		if err != nil {
			return nil, d.nameTensor(err, lo, hi)
		}
	}
	if err := d.checkTensor(t, &p, off); err != nil {
		return nil, err
	}
	return t, nil
}

// nameTensor adds the tensor's name to an error found before its name field
// was read: a second, forgiving pass looks for TensorProto.name.
func (d *decoder) nameTensor(err error, lo, hi int) error {
	de, ok := err.(*DecodeError)
	if !ok {
		return err
	}
	r := d.reader(lo, hi)
	var f field
	for {
		ok, e := r.next(&f)
		if e != nil || !ok {
			return err // no name to add
		}
		if f.num == 8 && f.typ == protowire.BytesType {
			de.Err = fmt.Errorf("tensor %q: %w", d.data[f.lo:f.hi], de.Err)
			return err
		}
	}
}

// typedValues adds one occurrence of a typed repeated field: a packed run
// (one segment) or a single unpacked value (one segment of its bytes).
func (d *decoder) typedValues(f *field, p *tensorParts) error {
	tf := typedFields[f.num]
	name := tf.name
	var n int64
	switch {
	case f.typ == protowire.BytesType:
		b := d.data[f.lo:f.hi]
		if len(b) == 0 {
			return nil // an empty packed run adds nothing
		}
		if tf.fixed > 0 {
			if len(b)%tf.fixed != 0 {
				return &DecodeError{Path: d.path, Field: name, Offset: f.off,
					Err: fmt.Errorf("packed %s of %d bytes, not a multiple of %d", name, len(b), tf.fixed)}
			}
			n = int64(len(b) / tf.fixed)
		} else {
			c, err := countVarints(b)
			if err != nil {
				return &DecodeError{Path: d.path, Field: name, Offset: f.off, Err: err}
			}
			n = int64(c)
		}
	case tf.fixed == 4 && f.typ == protowire.Fixed32Type, tf.fixed == 8 && f.typ == protowire.Fixed64Type,
		tf.fixed == 0 && f.typ == protowire.VarintType:
		n = 1
	default:
		want := protowire.VarintType
		switch tf.fixed {
		case 4:
			want = protowire.Fixed32Type
		case 8:
			want = protowire.Fixed64Type
		}
		return d.wrongType(f, name, want)
	}
	if err := d.useEncoding(f, p, tf.enc); err != nil {
		return err
	}
	p.segs = append(p.segs, d.payload(f))
	p.entries += n
	return nil
}

func (d *decoder) useEncoding(f *field, p *tensorParts, enc model.Encoding) error {
	if p.enc != model.EncodingNone && p.enc != enc {
		return &DecodeError{Path: d.path, Field: encodingField(enc), Offset: f.off,
			Err: fmt.Errorf("tensor stores values in both %s and %s", encodingField(p.enc), encodingField(enc))}
	}
	if p.enc == model.EncodingNone {
		p.enc, p.encOff = enc, f.off
	}
	return nil
}

// storage is the byte size of n elements of dt; ok is false on overflow.
func storage(dt model.DType, n int64) (size int64, ok bool) {
	bits := int64(dt.Bits())
	if bits < 8 {
		return n/8*bits + (n%8*bits+7)/8, true
	}
	if n > math.MaxInt64/(bits/8) {
		return 0, false
	}
	return n * (bits / 8), true
}

// checkTensor checks that the dtype, the dims and the stored values agree,
// and fills in t.DType and t.Data.
func (d *decoder) checkTensor(t *model.Tensor, p *tensorParts, off int) error {
	fail := func(field string, off int, format string, args ...any) error {
		return &DecodeError{Path: d.path, Field: field, Offset: off,
			Err: fmt.Errorf("tensor %q: %s", t.Name, fmt.Sprintf(format, args...))}
	}
	if p.negDim >= 0 {
		return fail(indexed("dims", p.negDim), p.negOff, "dimension %d is negative", t.Dims[p.negDim])
	}
	dt := model.DType(p.dtype)
	switch {
	case p.dtype == 0:
		return fail("data_type", p.dtypeOff, "no data_type")
	case !dt.Known():
		return fail("data_type", p.dtypeOff, "unsupported data_type %d", p.dtype)
	}
	t.DType = dt
	n := t.Elements()
	if n < 0 {
		return fail("dims", off, "dims %v hold more than 2^63-1 elements", t.Dims)
	}
	size, ok := storage(dt, n)
	if dt != model.String && !ok {
		return fail("dims", off, "dims %v of %s need more than 2^63-1 bytes", t.Dims, dt)
	}
	need := func() string {
		if dt == model.String {
			return fmt.Sprintf("%d strings", n)
		}
		return fmt.Sprintf("%d bytes", size)
	}

	switch p.location {
	case 0:
	case 1:
		if p.rawSeen || p.enc != model.EncodingNone {
			return fail("data_location", p.locOff, "data_location is EXTERNAL but values are also stored inline")
		}
		if dt == model.String {
			return fail("data_location", p.locOff, "string tensors cannot be stored externally")
		}
		ext, err := d.external(t, p, size)
		if err != nil {
			return err
		}
		t.Data = model.TensorData{Encoding: model.EncodingExternal, External: ext}
		return nil
	default:
		return fail("data_location", p.locOff, "unknown data_location %d", p.location)
	}

	switch {
	case p.rawSeen:
		if p.enc != model.EncodingNone {
			return fail(encodingField(p.enc), p.encOff, "stores values in both raw_data and %s", encodingField(p.enc))
		}
		if dt == model.String {
			return fail("raw_data", p.rawOff, "string tensors cannot use raw_data")
		}
		if int64(len(p.raw)) != size {
			return fail("raw_data", p.rawOff, "raw_data holds %d bytes, but dims %v of %s need %s", len(p.raw), t.Dims, dt, need())
		}
		t.Data = model.TensorData{Encoding: model.EncodingRaw, Segments: d.segments.copyOf(p.raw)}
	case p.enc != model.EncodingNone:
		if want := typedFieldFor(dt); p.enc != want {
			return fail(encodingField(p.enc), p.encOff, "%s values cannot be stored in %s (onnx.proto says %s)", dt, encodingField(p.enc), encodingField(want))
		}
		want := n
		switch {
		case dt == model.Complex64 || dt == model.Complex128:
			want, ok = 2*n, n <= math.MaxInt64/2
		case dt.Bits() == 4:
			want = (n + 1) / 2 // two 4-bit values per int32_data entry
		}
		if !ok || p.entries != want {
			return fail(encodingField(p.enc), p.encOff, "%s holds %d values, but dims %v of %s need %d", encodingField(p.enc), p.entries, t.Dims, dt, want)
		}
		t.Data = model.TensorData{Encoding: p.enc, Segments: p.segs}
	default:
		if n != 0 {
			return fail("", off, "stores no values, but dims %v of %s need %s", t.Dims, dt, need())
		}
		if dt == model.String {
			t.Data = model.TensorData{Encoding: model.EncodingStrings}
		} else {
			t.Data = model.TensorData{Encoding: model.EncodingRaw}
		}
	}
	return nil
}

// SparseTensorProto; off is the offset of the field that holds it.
func (d *decoder) sparse(lo, hi, off int) (*model.SparseTensor, error) {
	s := &model.SparseTensor{}
	r := d.reader(lo, hi)
	var f field
	for {
		ok, err := r.next(&f)
		if err != nil {
			return nil, err
		}
		if !ok {
			break
		}
		switch f.num {
		case 1:
			if err = d.msg(&f, "values"); err == nil {
				s.Values, err = d.tensor(f.lo, f.hi, f.off)
				err = within(err, "values")
			}
		case 2:
			if err = d.msg(&f, "indices"); err == nil {
				s.Indices, err = d.tensor(f.lo, f.hi, f.off)
				err = within(err, "indices")
			}
		case 3:
			start := len(s.Dims)
			s.Dims, err = d.appendInt64s(s.Dims, &f, indexed("dims", start))
			for i := start; err == nil && i < len(s.Dims); i++ {
				if s.Dims[i] < 0 {
					err = &DecodeError{Path: d.path, Field: indexed("dims", i), Offset: f.off,
						Err: fmt.Errorf("sparse tensor dimension %d is negative", s.Dims[i])}
				}
			}
		}
		if err != nil {
			return nil, err
		}
	}
	switch {
	case s.Values == nil:
		return nil, d.errAt(off, "sparse tensor has no values")
	case s.Indices == nil:
		return nil, d.errAt(off, "sparse tensor %q has no indices", s.Values.Name)
	case (&model.Tensor{Dims: s.Dims}).Elements() < 0:
		return nil, d.errAt(off, "sparse tensor %q: dims %v hold more than 2^63-1 elements", s.Values.Name, s.Dims)
	}
	return s, nil
}

// external checks a tensor's external_data entries and returns where its
// bytes are, with a Load that reads them on demand.
func (d *decoder) external(t *model.Tensor, p *tensorParts, size int64) (*model.ExternalData, error) {
	fail := func(format string, args ...any) error {
		return &DecodeError{Path: d.path, Field: "external_data", Offset: p.extOff,
			Err: fmt.Errorf("tensor %q: %s", t.Name, fmt.Sprintf(format, args...))}
	}
	loc, ok := p.ext["location"]
	if !ok {
		return nil, fail("data_location is EXTERNAL but external_data has no location")
	}
	clean, err := cleanLocation(loc)
	if err != nil {
		return nil, fail("external data location %q %v", loc, err)
	}
	ext := &model.ExternalData{Location: loc, Path: filepath.Join(d.dir, clean), Length: -1}
	for _, key := range []string{"offset", "length"} {
		s, ok := p.ext[key]
		if !ok {
			continue
		}
		v, err := strconv.ParseInt(s, 10, 64)
		if err != nil || v < 0 {
			return nil, fail("external data %q: bad %s %q", loc, key, s)
		}
		if key == "offset" {
			ext.Offset = v
		} else {
			ext.Length = v
		}
	}
	if ext.Length >= 0 && ext.Length != size {
		return nil, fail("external data %q: length %d, but dims %v of %s need %d bytes", loc, ext.Length, t.Dims, t.DType, size)
	}
	ext.Load = d.loader(t.Name, loc, ext.Path, ext.Offset, ext.Length, size)
	return ext, nil
}

// cleanLocation checks that an external data location is a relative path
// that stays inside the model's folder, and returns it cleaned. Backslashes
// count as separators, since models written on Windows use them.
func cleanLocation(loc string) (string, error) {
	s := strings.ReplaceAll(loc, `\`, "/")
	switch {
	case loc == "":
		return "", fmt.Errorf("is empty")
	case strings.ContainsRune(loc, 0):
		return "", fmt.Errorf("contains a NUL byte")
	case path.IsAbs(s) || filepath.IsAbs(loc) || filepath.VolumeName(loc) != "" || (len(s) >= 2 && s[1] == ':'):
		return "", fmt.Errorf("is an absolute path; external data must be relative to the model's folder")
	}
	c := path.Clean(s)
	if c == ".." || strings.HasPrefix(c, "../") {
		return "", fmt.Errorf("leaves the model's folder")
	}
	if c == "." {
		return "", fmt.Errorf("names the model's folder, not a file")
	}
	return filepath.FromSlash(c), nil
}

// insideFolder checks that file, with every symbolic link on its path resolved,
// is in dir (resolved too). The error names neither the link's target nor
// anything about it.
func insideFolder(dir, file string) error {
	realDir, err := filepath.EvalSymlinks(dir)
	if err != nil {
		return err
	}
	realFile, err := filepath.EvalSymlinks(file)
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return fmt.Errorf("%s does not exist (or is a broken link)", file)
		}
		return err
	}
	rel, err := filepath.Rel(realDir, realFile)
	if err != nil || rel == ".." || strings.HasPrefix(rel, ".."+string(filepath.Separator)) || filepath.IsAbs(rel) {
		return fmt.Errorf("%s is a symbolic link (or lies under one) that leads out of the model's folder; external data must stay inside it", file)
	}
	return nil
}

// loader returns an ExternalData.Load for one tensor. With the default file
// system it reads only the tensor's range; with Options.ReadFile it reads
// the file and slices it. Either way the range is checked against the file.
func (d *decoder) loader(name, loc, file string, offset, length, size int64) func() ([]byte, error) {
	modelPath, readFile, dir := d.path, d.readFile, d.dir
	prefix := func() string {
		if modelPath == "" {
			return fmt.Sprintf("tensor %q: external data %q", name, loc)
		}
		return fmt.Sprintf("%s: tensor %q: external data %q", modelPath, name, loc)
	}
	span := func(fileSize int64) (int64, error) {
		if offset > fileSize {
			return 0, fmt.Errorf("%s: offset %d is past the end of %s (%d bytes)", prefix(), offset, file, fileSize)
		}
		n := length
		if n < 0 {
			n = fileSize - offset
		}
		if n > fileSize-offset {
			return 0, fmt.Errorf("%s: offset %d + length %d is past the end of %s (%d bytes)", prefix(), offset, n, file, fileSize)
		}
		if n != size {
			return 0, fmt.Errorf("%s: %d bytes from offset %d, but the tensor's dims and dtype need %d", prefix(), n, offset, size)
		}
		return n, nil
	}
	return func() ([]byte, error) {
		if readFile != nil {
			b, err := readFile(file)
			if err != nil {
				return nil, fmt.Errorf("%s: %w", prefix(), err)
			}
			n, err := span(int64(len(b)))
			if err != nil {
				return nil, err
			}
			return b[offset : offset+n : offset+n], nil
		}
		// The location stays inside the model's folder as written
		// (cleanLocation); a symbolic link on the way may still lead out
		// of it, so the resolved path is checked too, before anything
		// about the file (its size, its kind) is read or said.
		if err := insideFolder(dir, file); err != nil {
			return nil, fmt.Errorf("%s: %w", prefix(), err)
		}
		fh, fileSize, err := regular.Open(file)
		if err != nil {
			return nil, fmt.Errorf("%s: %w", prefix(), err)
		}
		defer fh.Close()
		n, err := span(fileSize)
		if err != nil {
			return nil, err
		}
		b := make([]byte, n)
		if k, err := fh.ReadAt(b, offset); k < len(b) {
			if err == nil {
				err = io.ErrUnexpectedEOF
			}
			return nil, fmt.Errorf("%s: %w", prefix(), err)
		}
		return b, nil
	}
}
