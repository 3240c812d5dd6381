package demand

import (
	"syscall"
	"unsafe"
)

// madvHugepage is MADV_HUGEPAGE of <linux/mman.h>.
const madvHugepage = 14

// adviseHuge asks Linux to back the 2 MiB-aligned pages within [p, p+n)
// with transparent huge pages (madvise(2), MADV_HUGEPAGE). It is advice:
// where transparent huge pages are off, or the call fails, nothing
// changes, and the memory's contents are never affected.
func adviseHuge(p unsafe.Pointer, n uintptr) {
	const huge = 2 << 20
	start := (uintptr(p) + huge - 1) &^ (huge - 1)
	end := (uintptr(p) + n) &^ (huge - 1)
	if end <= start {
		return
	}
	b := unsafe.Slice((*byte)(unsafe.Add(p, start-uintptr(p))), end-start)
	_ = syscall.Madvise(b, madvHugepage)
}
