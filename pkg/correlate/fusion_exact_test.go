//go:build amd64 && !amd64.v3

package correlate

// exactRounding reports whether this build rounds every product on its
// own: on amd64 below GOAMD64=v3 the compiler never fuses x·y + z into one
// multiply-add. With GOAMD64=v3 (and on arm64, ppc64, s390x, riscv64) the
// Go specification lets it fuse, and two forms of one sum that are bitwise
// equal here may then differ in the last bits; see fusion_fused_test.go.
const exactRounding = true
