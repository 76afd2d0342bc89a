package localpg

import (
	"bytes"
	"slices"
	"testing"
)

// Byte layout of struct posix_acl_xattr_header / posix_acl_xattr_entry in
// include/uapi/linux/posix_acl_xattr.h and the ACL_* tag values of
// include/uapi/linux/posix_acl.h (from memory; TestThrowawayUnderPrivateDir
// has the kernel accept and enforce what grantSearch writes).
func TestEncodeACLLayout(t *testing.T) {
	const u = 0xff
	got := encodeACL(withUserSearch(aclFromMode(0o700), 101))
	want := []byte{
		2, 0, 0, 0, // version
		0x01, 0, 7, 0, u, u, u, u, // user::rwx
		0x02, 0, 1, 0, 101, 0, 0, 0, // user:101:--x
		0x04, 0, 0, 0, u, u, u, u, // group::---
		0x10, 0, 1, 0, u, u, u, u, // mask::--x
		0x20, 0, 0, 0, u, u, u, u, // other::---
	}
	if !bytes.Equal(got, want) {
		t.Errorf("encodeACL =\n% x\nwant\n% x", got, want)
	}
}

// setfacl semantics (POSIX.1e draft 17, common practice): adding a named
// user keeps the others sorted by id and widens an existing mask.
func TestWithUserSearchMergesExistingACL(t *testing.T) {
	existing := []aclEntry{
		{aclUserObj, 7, aclUndefinedID},
		{aclUser, 5, 200},
		{aclGroupObj, 5, aclUndefinedID},
		{aclMask, 4, aclUndefinedID},
		{aclOther, 0, aclUndefinedID},
	}
	got := withUserSearch(existing, 101)
	want := []aclEntry{
		{aclUserObj, 7, aclUndefinedID},
		{aclUser, 1, 101},
		{aclUser, 5, 200},
		{aclGroupObj, 5, aclUndefinedID},
		{aclMask, 5, aclUndefinedID},
		{aclOther, 0, aclUndefinedID},
	}
	if !slices.Equal(got, want) {
		t.Errorf("withUserSearch = %v, want %v", got, want)
	}
	again := withUserSearch(got, 200) // existing entry: only adds x
	if again[2] != (aclEntry{aclUser, 5, 200}) || len(again) != len(got) {
		t.Errorf("second grant = %v", again)
	}
	decoded, err := decodeACL(encodeACL(got))
	if err != nil || !slices.Equal(decoded, got) {
		t.Errorf("decode(encode) = %v, %v", decoded, err)
	}
	if _, err := decodeACL([]byte{2, 0, 0, 0, 1}); err == nil {
		t.Error("decodeACL accepted a truncated attribute")
	}
}
