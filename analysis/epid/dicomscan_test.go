package epid

import (
	"bytes"
	"encoding/binary"
	"errors"
	"testing"

	"github.com/suyashkumar/dicom/pkg/uid"
)

// Hand-made explicit VR little endian streams following PS3.5 section 7:
// short form tag(4) VR(2) length(2); long form (OB, OW, SQ, UN, ...) tag(4)
// VR(2) 0000 length(4); items and delimiters tag(4) length(4).
func el(group, elem uint16, vr string, value []byte) []byte {
	var b bytes.Buffer
	binary.Write(&b, binary.LittleEndian, [2]uint16{group, elem})
	b.WriteString(vr)
	if longVR(vr) {
		b.Write([]byte{0, 0})
		binary.Write(&b, binary.LittleEndian, uint32(len(value)))
	} else {
		binary.Write(&b, binary.LittleEndian, uint16(len(value)))
	}
	b.Write(value)
	return b.Bytes()
}

func elLen(group, elem uint16, vr string, length uint32) []byte {
	var b bytes.Buffer
	binary.Write(&b, binary.LittleEndian, [2]uint16{group, elem})
	b.WriteString(vr)
	b.Write([]byte{0, 0})
	binary.Write(&b, binary.LittleEndian, length)
	return b.Bytes()
}

func itemHdr(elem uint16, length uint32) []byte {
	var b bytes.Buffer
	binary.Write(&b, binary.LittleEndian, [2]uint16{0xFFFE, elem})
	binary.Write(&b, binary.LittleEndian, length)
	return b.Bytes()
}

func cat(parts ...[]byte) []byte { return bytes.Join(parts, nil) }

func walk(b []byte) error {
	w := walker{b: b, order: binary.LittleEndian}
	return w.elements(0, len(b), 0, false)
}

func TestWalkerStructures(t *testing.T) {
	angle := el(0x300A, 0x011E, "DS", []byte("90"))
	definedItem := cat(itemHdr(0xE000, uint32(len(angle))), angle)
	undefItem := cat(itemHdr(0xE000, undefinedLen), angle, itemHdr(0xE00D, 0))
	ok := map[string][]byte{
		"defined sequence, defined item": cat(elLen(0x3002, 0x0030, "SQ", uint32(len(definedItem))), definedItem),
		"undefined sequence, undefined item": cat(elLen(0x3002, 0x0030, "SQ", undefinedLen), undefItem,
			itemHdr(0xE0DD, 0)),
		"undefined OB with fragments": cat(elLen(0x0009, 0x1010, "OB", undefinedLen), itemHdr(0xE000, 4), []byte{1, 2, 3, 4},
			itemHdr(0xE0DD, 0), angle),
		"nested": cat(elLen(0x3002, 0x0030, "SQ", undefinedLen), itemHdr(0xE000, undefinedLen),
			elLen(0x300A, 0x00B6, "SQ", undefinedLen), undefItem, itemHdr(0xE0DD, 0),
			itemHdr(0xE00D, 0), itemHdr(0xE0DD, 0)),
	}
	for name, b := range ok {
		if err := walk(b); err != nil {
			t.Errorf("%s: %v", name, err)
		}
	}
	bad := map[string][]byte{
		"length past end":             cat(el(0x0010, 0x0010, "PN", []byte("AB")), elLen(0x0009, 0x1010, "OB", 1<<31)),
		"short length past end":       append(el(0x0010, 0x0010, "PN", []byte("ABCD")), 0x10, 0x00, 0x20, 0x00, 'L', 'O', 0xff, 0x00),
		"sequence item too long":      cat(elLen(0x3002, 0x0030, "SQ", 8), itemHdr(0xE000, 100)),
		"non-item in sequence":        cat(elLen(0x3002, 0x0030, "SQ", undefinedLen), angle),
		"fragment too long":           cat(elLen(0x0009, 0x1010, "OB", undefinedLen), itemHdr(0xE000, 1000)),
		"undefined string":            elLen(0x0008, 0x0060, "UT", undefinedLen),
		"stray delimiter":             itemHdr(0xE0DD, 0),
		"item without delimiter":      cat(elLen(0x3002, 0x0030, "SQ", undefinedLen), itemHdr(0xE000, undefinedLen), angle),
		"header cut short":            angle[:5],
		"unknown delimiter-group tag": itemHdr(0x1234, 0),
	}
	for name, b := range bad {
		if err := walk(b); !errors.Is(err, ErrNotDICOM) {
			t.Errorf("%s: %v, want ErrNotDICOM", name, err)
		}
	}
	// Encapsulated pixel data is refused as unsupported.
	if err := walk(elLen(0x7FE0, 0x0010, "OB", undefinedLen)); !errors.Is(err, ErrUnsupported) {
		t.Errorf("encapsulated pixel data: %v, want ErrUnsupported", err)
	}
	// Nesting beyond maxNesting is refused.
	deep := []byte{}
	for range maxNesting + 2 {
		deep = append(deep, cat(elLen(0x3002, 0x0030, "SQ", undefinedLen), itemHdr(0xE000, undefinedLen))...)
	}
	if err := walk(deep); !errors.Is(err, ErrNotDICOM) {
		t.Errorf("deep nesting: %v, want ErrNotDICOM", err)
	}
}

func TestPreflightHeader(t *testing.T) {
	meta := func(ts string) []byte {
		tsEl := el(0x0002, 0x0010, "UI", []byte(ts+"\x00"[:len(ts)%2]))
		gl := make([]byte, 4)
		binary.LittleEndian.PutUint32(gl, uint32(len(tsEl)))
		return cat(make([]byte, 128), []byte("DICM"), el(0x0002, 0x0000, "UL", gl), tsEl)
	}
	body := el(0x0008, 0x0060, "CS", []byte("RTIMAGE "))
	if s, err := preflight(cat(meta(uid.ExplicitVRLittleEndian), body), 1<<20); err != nil || s.implicit || s.order != binary.LittleEndian {
		t.Errorf("explicit LE: %+v %v", s, err)
	}
	if _, err := preflight(cat(meta("1.2.840.10008.1.2.4.90"), body), 1<<20); !errors.Is(err, ErrUnsupported) {
		t.Errorf("JPEG 2000 syntax: %v, want ErrUnsupported", err)
	}
	if _, err := preflight(cat(meta(""), body), 1<<20); !errors.Is(err, ErrNotDICOM) {
		t.Errorf("no transfer syntax: %v, want ErrNotDICOM", err)
	}
	noMagic := cat(meta(uid.ExplicitVRLittleEndian), body)
	copy(noMagic[128:], "XXXX")
	if _, err := preflight(noMagic, 1<<20); !errors.Is(err, ErrNotDICOM) {
		t.Errorf("no DICM: %v, want ErrNotDICOM", err)
	}
	longMeta := meta(uid.ExplicitVRLittleEndian)
	binary.LittleEndian.PutUint32(longMeta[140:], 1<<30)
	if _, err := preflight(longMeta, 1<<20); !errors.Is(err, ErrNotDICOM) {
		t.Errorf("meta group length past the end: %v, want ErrNotDICOM", err)
	}
}
