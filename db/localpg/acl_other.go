//go:build !linux

package localpg

import "errors"

// grantSearch needs Linux POSIX ACL attributes; elsewhere the caller falls
// back to chmod on directories it created or reports what to change.
func grantSearch(dir string, uid uint32) error {
	return errors.ErrUnsupported
}
