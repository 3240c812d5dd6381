package demand

import "unsafe"

// Large columns are allocated through makeFloats and makeInt32s, which ask
// the operating system (where it can be asked, see alloc_linux.go) to back
// them with huge pages: a column of millions of rows then costs a few
// hundred page faults instead of hundreds of thousands, which on virtual
// machines is a large part of the time spent loading a panel.

// hugeMin is the smallest allocation, in bytes, worth the advice.
const hugeMin = 8 << 20

// makeFloats returns make([]float64, n), advised for huge pages when large.
func makeFloats(n int) []float64 {
	x := make([]float64, n)
	if n*8 >= hugeMin {
		adviseHuge(unsafe.Pointer(unsafe.SliceData(x)), uintptr(n)*8)
	}
	return x
}

// makeInt32s returns make([]int32, n), advised for huge pages when large.
func makeInt32s(n int) []int32 {
	x := make([]int32, n)
	if n*4 >= hugeMin {
		adviseHuge(unsafe.Pointer(unsafe.SliceData(x)), uintptr(n)*4)
	}
	return x
}
