package service_test

import (
	"encoding/binary"
	"hash/crc32"
	"net/http"
	"strings"
	"testing"
)

// pngEdit returns a copy of the PNG file b with byte i set to v and the
// CRC-32 of the chunk holding it made right again (ISO/IEC 15948:2003,
// PNG second edition, 5.3: length, type, data, CRC over type and data).
func pngEdit(t *testing.T, b []byte, i int, v byte) []byte {
	t.Helper()
	out := append([]byte(nil), b...)
	out[i] = v
	for p := 8; p+12 <= len(out); {
		n := int(binary.BigEndian.Uint32(out[p:]))
		if i >= p+8 && i < p+8+n {
			binary.BigEndian.PutUint32(out[p+8+n:], crc32.ChecksumIEEE(out[p+4:p+8+n]))
			return out
		}
		p += 12 + n
	}
	t.Fatalf("byte %d is not in a chunk's data", i)
	return nil
}

// idat returns the offset of the data of the first IDAT chunk of b.
func idat(t *testing.T, b []byte) (off, n int) {
	t.Helper()
	for p := 8; p+12 <= len(b); {
		n := int(binary.BigEndian.Uint32(b[p:]))
		if string(b[p+4:p+8]) == "IDAT" {
			return p + 8, n
		}
		p += 12 + n
	}
	t.Fatal("no IDAT chunk")
	return 0, 0
}

// TestFrameUploadCheck: a PNG frame of a series is checked at upload
// without decoding its pixels (imageio.CheckPNG). A frame cut short, with
// a byte changed, with a header that is not a PNG bit depth, or of
// another size than the reference is refused at once with a problem
// naming the body; a frame whose chunks are intact but whose compressed
// data is damaged (a faulty encoder's file) is accepted, fails in the
// worker with the decoder's error, and the series goes on.
func TestFrameUploadCheck(t *testing.T) {
	ts := newServer(t, nil)
	ref := encodePNG(t, speckle(40, 40, 0, 0, 11))
	ct, body := multipartBody(t, part{"reference", "ref.png", "image/png", ref}, part{"params", "", "application/json", []byte(`{"subset": 15}`)})
	resp, b := ts.do(t, "POST", "/v1/series", ct, body)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("POST /v1/series: %d %s", resp.StatusCode, b)
	}
	frames := "/v1/series/" + decodeJSON[struct{ ID string }](t, b).ID + "/frames"
	good := encodePNG(t, speckle(40, 40, 1, 0, 11))
	flipped := append([]byte(nil), good...)
	flipped[len(good)/2] ^= 0x04
	at, n := idat(t, good)
	for _, c := range []struct {
		name   string
		b      []byte
		status int
		detail string
	}{
		{"cut short", good[:len(good)/2], 400, "ends early"},
		{"a byte changed", flipped, 400, "CRC"},
		{"bit depth 3", pngEdit(t, good, 8+8+8, 3), 400, "bit depth 3"},
		{"compression method 1", pngEdit(t, good, 8+8+10, 1), 400, "compression method"},
		{"no zlib header", pngEdit(t, good, at, 0x79), 400, "zlib"},
		{"another size", encodePNG(t, speckle(40, 32, 1, 0, 11)), 422, "40×32"},
	} {
		resp, b := ts.do(t, "POST", frames+"?wait=false", "image/png", c.b)
		p := decodeJSON[problemDoc](t, b)
		named := false
		for _, f := range p.Errors {
			named = named || f.Field == "body"
		}
		if resp.StatusCode != c.status || !named || !strings.Contains(p.Detail, c.detail) {
			t.Errorf("%s: %d %s, want %d naming the body with %q", c.name, resp.StatusCode, b, c.status, c.detail)
		}
	}
	// Damage inside the compressed data, the chunk's CRC made right: only
	// an inflate finds it, so the worker does.
	damaged := pngEdit(t, good, at+n/2, good[at+n/2]^0xff)
	resp, b = ts.do(t, "POST", frames+"?wait=false", "image/png", damaged)
	if resp.StatusCode != http.StatusAccepted {
		t.Fatalf("damaged compressed data: %d %s, want 202", resp.StatusCode, b)
	}
	j := ts.waitDone(t, frames+"/0")
	if j.State != "failed" || j.Error == nil || !strings.Contains(j.Error.Detail, "corrupt") {
		t.Fatalf("frame 0 with damaged compressed data: %+v %+v", j, j.Error)
	}
	resp, b = ts.do(t, "POST", frames, "image/png", good)
	if j := decodeJSON[jobDoc](t, b); resp.StatusCode != 200 || j.Frame != 1 || j.State != "succeeded" {
		t.Fatalf("the next frame: %d %s", resp.StatusCode, b)
	}
}
