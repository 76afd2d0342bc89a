package epid

import (
	"bytes"
	"compress/flate"
	"encoding/binary"
	"fmt"
	"io"
	"strings"

	"github.com/suyashkumar/dicom/pkg/tag"
	"github.com/suyashkumar/dicom/pkg/uid"
)

// The DICOM parser allocates each element's value before it checks that the
// bytes exist, so a few corrupt length fields can ask for gigabytes. preflight
// walks the element structure first, with the same rules as the parser
// (PS3.5 section 7: explicit and implicit VR, defined and undefined lengths,
// items and delimiters), and refuses any declared length that runs past its
// enclosing element or the end of the file. It also reads the transfer syntax
// so compressed files are refused before parsing.

const (
	maxNesting   = 24         // sequence depth accepted
	dicmOffset   = 128        // preamble length, PS3.10 section 7.1
	undefinedLen = ^uint32(0) // 0xFFFFFFFF
)

type syntax struct {
	uid      string
	order    binary.ByteOrder
	implicit bool
	deflated bool
}

// preflight checks b (a whole DICOM Part 10 file) and returns its transfer
// syntax. maxInflated bounds the inflated size of a deflated data set.
func preflight(b []byte, maxInflated int64) (syntax, error) {
	if len(b) < dicmOffset+4 || string(b[dicmOffset:dicmOffset+4]) != "DICM" {
		return syntax{}, fmt.Errorf("%w: no \"DICM\" marker at byte 128 (%d bytes read); export the image as a DICOM Part 10 file", ErrNotDICOM, len(b))
	}
	// File meta information: explicit VR little endian, led by its group length.
	w := walker{b: b, order: binary.LittleEndian}
	pos := dicmOffset + 4
	if len(b) < pos+12 || binary.LittleEndian.Uint16(b[pos:]) != 2 || binary.LittleEndian.Uint16(b[pos+2:]) != 0 ||
		string(b[pos+4:pos+6]) != "UL" || binary.LittleEndian.Uint16(b[pos+6:]) != 4 {
		return syntax{}, fmt.Errorf("%w: file meta information does not start with its group length (0002,0000) UL", ErrNotDICOM)
	}
	metaLen := int(binary.LittleEndian.Uint32(b[pos+8:]))
	pos += 12
	metaEnd := pos + metaLen
	if metaLen < 0 || metaEnd > len(b) || metaEnd < pos {
		return syntax{}, fmt.Errorf("%w: file meta group length %d runs past the end of the %d-byte file", ErrNotDICOM, metaLen, len(b))
	}
	var tsUID string
	w.onElement = func(t tag.Tag, value []byte) {
		if t == tag.TransferSyntaxUID {
			tsUID = strings.Trim(string(value), " \x00")
		}
	}
	if err := w.elements(pos, metaEnd, 0, false); err != nil {
		return syntax{}, fmt.Errorf("file meta information: %w", err)
	}
	w.onElement = nil

	var s syntax
	s.uid = tsUID
	switch tsUID {
	case uid.ImplicitVRLittleEndian:
		s.order, s.implicit = binary.LittleEndian, true
	case uid.ExplicitVRLittleEndian:
		s.order = binary.LittleEndian
	case uid.ExplicitVRBigEndian:
		s.order = binary.BigEndian
	case uid.DeflatedExplicitVRLittleEndian:
		s.order, s.deflated = binary.LittleEndian, true
	case "":
		return syntax{}, fmt.Errorf("%w: file meta information has no TransferSyntaxUID (0002,0010)", ErrNotDICOM)
	default:
		name := "unknown transfer syntax"
		if info, err := uid.Lookup(tsUID); err == nil {
			name = info.Name
		}
		return syntax{}, fmt.Errorf("%w: transfer syntax %s (%s): compressed or encapsulated pixel data is not supported; export the image uncompressed (Explicit VR Little Endian)", ErrUnsupported, tsUID, name)
	}

	data := b[metaEnd:]
	if s.deflated {
		zr := flate.NewReader(bytes.NewReader(data))
		inflated, err := io.ReadAll(io.LimitReader(zr, maxInflated+1))
		if err != nil {
			return syntax{}, fmt.Errorf("%w: deflated data set cannot be inflated: %v", ErrNotDICOM, err)
		}
		if int64(len(inflated)) > maxInflated {
			return syntax{}, fmt.Errorf("%w: deflated data set inflates to more than %d bytes; raise DecodeOptions.MaxBytes if the file is genuine", ErrUnsupported, maxInflated)
		}
		data = inflated
	}
	w = walker{b: data, order: s.order, implicit: s.implicit}
	if err := w.elements(0, len(data), 0, false); err != nil {
		return syntax{}, err
	}
	return s, nil
}

// walker checks element lengths in b under one transfer syntax.
type walker struct {
	b         []byte
	order     binary.ByteOrder
	implicit  bool
	onElement func(t tag.Tag, value []byte) // called for defined-length non-sequence elements
}

func (w *walker) errAt(pos int, format string, args ...any) error {
	return fmt.Errorf("%w: at byte %d: %s", ErrNotDICOM, pos, fmt.Sprintf(format, args...))
}

func (w *walker) tagAt(pos int) tag.Tag {
	return tag.Tag{Group: w.order.Uint16(w.b[pos:]), Element: w.order.Uint16(w.b[pos+2:])}
}

// longVR lists the explicit VRs with a 2-byte reserved field and a 4-byte
// length (PS3.5 table 7.1-1), as the parser reads them.
func longVR(vr string) bool {
	switch vr {
	case "NA", "OB", "OD", "OF", "OL", "OW", "SQ", "UN", "UC", "UR", "UT":
		return true
	}
	return false
}

// header reads the element header at pos and returns its tag, VR, value length
// and the offset of the value.
func (w *walker) header(pos, end int) (t tag.Tag, vr string, vl uint32, val int, err error) {
	if end-pos < 8 {
		return t, "", 0, 0, w.errAt(pos, "element header cut short (%d bytes left)", end-pos)
	}
	t = w.tagAt(pos)
	if w.implicit || t.Group == tag.GroupSeqItem {
		// Items and delimiters are always implicit (PS3.5 section 7.5).
		vr = implicitVR(t)
		return t, vr, w.order.Uint32(w.b[pos+4:]), pos + 8, nil
	}
	vr = string(w.b[pos+4 : pos+6])
	if longVR(vr) {
		if end-pos < 12 {
			return t, vr, 0, 0, w.errAt(pos, "element %s header cut short", t)
		}
		return t, vr, w.order.Uint32(w.b[pos+8:]), pos + 12, nil
	}
	vl = uint32(w.order.Uint16(w.b[pos+6:]))
	if vl == 0xffff {
		vl = undefinedLen
	}
	return t, vr, vl, pos + 8, nil
}

func implicitVR(t tag.Tag) string {
	if t == tag.PixelData || t == tag.OverlayData {
		return "OW"
	}
	if info, err := tag.Find(t); err == nil {
		return info.VRs[0]
	}
	return "UN"
}

// elements walks data elements in [pos, end). With untilItemEnd it stops after
// an Item Delimitation Item and returns the offset after it.
func (w *walker) elements(pos, end, depth int, untilItemEnd bool) error {
	_, err := w.elementsTo(pos, end, depth, untilItemEnd)
	return err
}

func (w *walker) elementsTo(pos, end, depth int, untilItemEnd bool) (int, error) {
	if depth > maxNesting {
		return 0, w.errAt(pos, "sequences nested deeper than %d", maxNesting)
	}
	for pos < end {
		t, vr, vl, val, err := w.header(pos, end)
		if err != nil {
			return 0, err
		}
		switch t {
		case tag.ItemDelimitationItem:
			if vl != 0 {
				return 0, w.errAt(pos, "item delimiter with length %d", vl)
			}
			if untilItemEnd {
				return val, nil
			}
			return 0, w.errAt(pos, "item delimiter outside an item")
		case tag.SequenceDelimitationItem:
			return 0, w.errAt(pos, "sequence delimiter outside a sequence")
		case tag.Item:
			pos, err = w.item(val, end, vl, depth)
			if err != nil {
				return 0, err
			}
			continue
		}
		if t.Group == tag.GroupSeqItem {
			return 0, w.errAt(pos, "unknown delimiter tag %s", t)
		}
		kind := tag.GetVRKind(t, vr)
		if vl == undefinedLen {
			switch {
			case t == tag.PixelData:
				return 0, fmt.Errorf("%w: encapsulated (compressed) pixel data; export the image uncompressed", ErrUnsupported)
			case kind == tag.VRBytes:
				pos, err = w.fragments(val, end)
			case kind == tag.VRSequence || kind == tag.VRUnknown:
				pos, err = w.sequence(val, end, depth+1)
			default:
				err = w.errAt(pos, "element %s (VR %q) has undefined length", t, vr)
			}
			if err != nil {
				return 0, err
			}
			continue
		}
		next := val + int(vl)
		if int64(val)+int64(vl) > int64(end) {
			return 0, w.errAt(pos, "element %s declares %d bytes but only %d remain", t, vl, end-val)
		}
		if kind == tag.VRSequence {
			if err := w.definedSequence(val, next, depth+1); err != nil {
				return 0, err
			}
		} else if w.onElement != nil {
			w.onElement(t, w.b[val:next])
		}
		pos = next
	}
	if untilItemEnd {
		return 0, w.errAt(pos, "item without its delimiter")
	}
	return pos, nil
}

// item walks one item whose header ended at val.
func (w *walker) item(val, end int, vl uint32, depth int) (int, error) {
	if vl == undefinedLen {
		return w.elementsTo(val, end, depth+1, true)
	}
	if int64(val)+int64(vl) > int64(end) {
		return 0, w.errAt(val, "item declares %d bytes but only %d remain", vl, end-val)
	}
	if err := w.elements(val, val+int(vl), depth+1, false); err != nil {
		return 0, err
	}
	return val + int(vl), nil
}

// sequence walks an undefined-length sequence up to its delimiter.
func (w *walker) sequence(pos, end, depth int) (int, error) {
	for {
		t, _, vl, val, err := w.header(pos, end)
		if err != nil {
			return 0, err
		}
		switch t {
		case tag.SequenceDelimitationItem:
			if vl != 0 {
				return 0, w.errAt(pos, "sequence delimiter with length %d", vl)
			}
			return val, nil
		case tag.Item:
			if pos, err = w.item(val, end, vl, depth); err != nil {
				return 0, err
			}
		default:
			return 0, w.errAt(pos, "element %s where a sequence item was expected", t)
		}
	}
}

// definedSequence walks a sequence of defined length occupying [pos, end).
func (w *walker) definedSequence(pos, end, depth int) error {
	for pos < end {
		t, _, vl, val, err := w.header(pos, end)
		if err != nil {
			return err
		}
		if t != tag.Item {
			return w.errAt(pos, "element %s where a sequence item was expected", t)
		}
		if pos, err = w.item(val, end, vl, depth); err != nil {
			return err
		}
	}
	return nil
}

// fragments walks the items of an undefined-length OB/OW value.
func (w *walker) fragments(pos, end int) (int, error) {
	for {
		t, _, vl, val, err := w.header(pos, end)
		if err != nil {
			return 0, err
		}
		switch {
		case t == tag.SequenceDelimitationItem:
			return val, nil
		case t != tag.Item || vl == undefinedLen:
			return 0, w.errAt(pos, "malformed fragment %s", t)
		case int64(val)+int64(vl) > int64(end):
			return 0, w.errAt(pos, "fragment declares %d bytes but only %d remain", vl, end-val)
		}
		pos = val + int(vl)
	}
}
