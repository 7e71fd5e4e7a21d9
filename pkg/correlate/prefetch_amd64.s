#include "textflag.h"

// func prefetchRows(a uintptr, rows, stride, lines int)
//
// PREFETCHT0 of lines consecutive 64-byte lines from a, and the same for
// each of the rows−1 further rows stride bytes apart. A prefetch is a hint:
// it never faults and changes no data.
TEXT ·prefetchRows(SB), NOSPLIT, $0-32
	MOVQ a+0(FP), AX
	MOVQ rows+8(FP), BX
	MOVQ stride+16(FP), CX
	MOVQ lines+24(FP), DX
	TESTQ BX, BX
	JLE done
	TESTQ DX, DX
	JLE done
row:
	MOVQ AX, SI
	MOVQ DX, DI
line:
	PREFETCHT0 (SI)
	ADDQ $64, SI
	DECQ DI
	JNZ line
	ADDQ CX, AX
	DECQ BX
	JNZ row
done:
	RET
