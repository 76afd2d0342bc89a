package localpg

import (
	"encoding/binary"
	"errors"
	"fmt"
	"slices"
	"syscall"
)

// POSIX access ACLs are stored by Linux in the "system.posix_acl_access"
// extended attribute: a little-endian 4-byte version (2) followed by 8-byte
// entries {tag uint16, perm uint16, id uint32}, sorted by tag and then id
// (include/uapi/linux/posix_acl_xattr.h and posix_acl.h; layout from memory,
// checked by the kernel itself when the attribute is set).
const (
	aclXattr   = "system.posix_acl_access"
	aclVersion = 2

	aclUserObj  = 0x01
	aclUser     = 0x02
	aclGroupObj = 0x04
	aclGroup    = 0x08
	aclMask     = 0x10
	aclOther    = 0x20

	aclUndefinedID = 0xffffffff
	aclExecute     = 0x1
)

type aclEntry struct {
	tag, perm uint16
	id        uint32
}

// grantSearch adds "user:uid:--x" to dir's access ACL (keeping every other
// entry) and widens the mask so the entry takes effect. The group owner's own
// permissions are unchanged: ls shows the mask in the group bits.
func grantSearch(dir string, uid uint32) error {
	var st syscall.Stat_t
	if err := syscall.Stat(dir, &st); err != nil {
		return err
	}
	var entries []aclEntry
	size, err := syscall.Getxattr(dir, aclXattr, nil)
	switch {
	case err == nil && size > 0:
		buf := make([]byte, size)
		n, err := syscall.Getxattr(dir, aclXattr, buf)
		if err != nil {
			return err
		}
		if entries, err = decodeACL(buf[:n]); err != nil {
			return err
		}
	case err == nil, errors.Is(err, syscall.ENODATA):
		entries = aclFromMode(st.Mode)
	default:
		return err
	}
	return syscall.Setxattr(dir, aclXattr, encodeACL(withUserSearch(entries, uid)), 0)
}

// aclFromMode is the minimal ACL equivalent to the permission bits of mode.
func aclFromMode(mode uint32) []aclEntry {
	return []aclEntry{
		{aclUserObj, uint16(mode>>6) & 7, aclUndefinedID},
		{aclGroupObj, uint16(mode>>3) & 7, aclUndefinedID},
		{aclOther, uint16(mode) & 7, aclUndefinedID},
	}
}

// withUserSearch returns entries with execute added to uid's named-user entry
// (created if missing) and to the mask (created as the union of the group
// class when missing, as setfacl does), sorted as the kernel requires.
func withUserSearch(entries []aclEntry, uid uint32) []aclEntry {
	out := slices.Clone(entries)
	found, maskAt := false, -1
	var groupClass uint16
	for i := range out {
		switch out[i].tag {
		case aclUser:
			if out[i].id == uid {
				out[i].perm |= aclExecute
				found = true
			}
			groupClass |= out[i].perm
		case aclGroupObj, aclGroup:
			groupClass |= out[i].perm
		case aclMask:
			maskAt = i
		}
	}
	if !found {
		out = append(out, aclEntry{aclUser, aclExecute, uid})
		groupClass |= aclExecute
	}
	if maskAt >= 0 {
		out[maskAt].perm |= aclExecute
	} else {
		out = append(out, aclEntry{aclMask, groupClass | aclExecute, aclUndefinedID})
	}
	slices.SortFunc(out, func(a, b aclEntry) int {
		if a.tag != b.tag {
			return int(a.tag) - int(b.tag)
		}
		switch {
		case a.id < b.id:
			return -1
		case a.id > b.id:
			return 1
		}
		return 0
	})
	return out
}

func encodeACL(entries []aclEntry) []byte {
	buf := make([]byte, 4+8*len(entries))
	binary.LittleEndian.PutUint32(buf, aclVersion)
	for i, e := range entries {
		b := buf[4+8*i:]
		binary.LittleEndian.PutUint16(b, e.tag)
		binary.LittleEndian.PutUint16(b[2:], e.perm)
		binary.LittleEndian.PutUint32(b[4:], e.id)
	}
	return buf
}

func decodeACL(buf []byte) ([]aclEntry, error) {
	if len(buf) < 4 || (len(buf)-4)%8 != 0 {
		return nil, fmt.Errorf("ACL attribute has %d bytes, want 4+8n", len(buf))
	}
	if v := binary.LittleEndian.Uint32(buf); v != aclVersion {
		return nil, fmt.Errorf("ACL attribute version %d, want %d", v, aclVersion)
	}
	entries := make([]aclEntry, (len(buf)-4)/8)
	for i := range entries {
		b := buf[4+8*i:]
		entries[i] = aclEntry{
			tag:  binary.LittleEndian.Uint16(b),
			perm: binary.LittleEndian.Uint16(b[2:]),
			id:   binary.LittleEndian.Uint32(b[4:]),
		}
	}
	return entries, nil
}
