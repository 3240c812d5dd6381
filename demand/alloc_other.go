//go:build !linux

package demand

import "unsafe"

// adviseHuge does nothing where huge pages cannot be asked for.
func adviseHuge(unsafe.Pointer, uintptr) {}
