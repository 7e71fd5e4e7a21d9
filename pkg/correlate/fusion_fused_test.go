//go:build !amd64 || amd64.v3

package correlate

// exactRounding is false where the compiler may fuse x·y + z into one
// multiply-add (The Go Programming Language Specification, "Floating-point
// operators": an implementation may fuse, an explicit conversion prevents
// it): GOAMD64=v3 and the architectures with FMA in their base set. Tests
// that compare two forms of one computation bit for bit compare them within
// a stated rounding bound instead; see fusion_exact_test.go.
const exactRounding = false
