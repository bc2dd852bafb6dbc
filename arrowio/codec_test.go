package arrowio

import (
	"bytes"
	"encoding/binary"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"sync"
	"testing"

	"github.com/apache/arrow/go/v17/arrow/memory"
	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/klauspost/compress/zstd"
)

// useCodec registers c for zstd until the end of the test. The codec table
// is a plain map, so tests that call this must not run in parallel.
func useCodec(t testing.TB, c compress.Codec) {
	compress.RegisterCodec(compress.Codecs.Zstd, c)
	t.Cleanup(func() { compress.RegisterCodec(compress.Codecs.Zstd, reuseZstd{stockZstd}) })
}

// TestReuseZstdRegistered checks that package init replaced Arrow's codec.
func TestReuseZstdRegistered(t *testing.T) {
	c, err := compress.GetCodec(compress.Codecs.Zstd)
	if err != nil {
		t.Fatal(err)
	}
	if _, ok := c.(reuseZstd); !ok {
		t.Fatalf("zstd codec is %T, want reuseZstd", c)
	}
}

// TestReuseZstdFrames compresses blocks at several levels, from several
// goroutines at once, and decodes each with a fresh decoder of
// github.com/klauspost/compress/zstd; each must also equal what Arrow's own
// codec produces for the same input.
func TestReuseZstdFrames(t *testing.T) {
	dec, err := zstd.NewReader(nil)
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	rng := rand.New(rand.NewPCG(1, 2))
	blocks := make([][]byte, 8)
	for i := range blocks {
		b := make([]byte, 1000+rng.IntN(60_000))
		for j := range b {
			b[j] = byte(rng.IntN(8 + 32*i)) // from very to hardly compressible
		}
		blocks[i] = b
	}
	blocks = append(blocks, []byte{}) // empty input still makes a frame
	levels := []int{compress.DefaultCompressionLevel, 1, 3, 7}
	var wg sync.WaitGroup
	errs := make([]error, len(blocks)*len(levels))
	for i, src := range blocks {
		for j, level := range levels {
			wg.Add(1)
			go func() {
				defer wg.Done()
				got := reuseZstd{stockZstd}.EncodeLevel(nil, src, level)
				want := stockZstd.EncodeLevel(nil, src, level)
				plain, err := dec.DecodeAll(got, nil)
				switch {
				case err != nil:
					errs[i*len(levels)+j] = fmt.Errorf("block %d level %d: %v", i, level, err)
				case !bytes.Equal(plain, src):
					errs[i*len(levels)+j] = fmt.Errorf("block %d level %d: round trip differs", i, level)
				case !bytes.Equal(got, want):
					errs[i*len(levels)+j] = fmt.Errorf("block %d level %d: %d bytes, Arrow's codec gives %d", i, level, len(got), len(want))
				}
			}()
		}
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			t.Error(err)
		}
	}
}

// TestReuseZstdFileMatchesStock writes the same data with Arrow's codec
// and with the reusing one: the files must be byte-identical, and both
// read back equal through github.com/xitongsys/parquet-go.
func TestReuseZstdFileMatchesStock(t *testing.T) {
	mem := memory.NewCheckedAllocator(memory.NewGoAllocator())
	defer mem.AssertSize(t, 0)
	rows := mixedRows(20_000)
	reused := tempPath(t, "reuse.parquet")
	writeRows(t, mem, reused, rows, 4096, WriteOptions{Compression: Zstd, RowGroupRows: 8192})
	stock := tempPath(t, "stock.parquet")
	useCodec(t, stockZstd)
	writeRows(t, mem, stock, rows, 4096, WriteOptions{Compression: Zstd, RowGroupRows: 8192})
	a, err := os.ReadFile(reused)
	if err != nil {
		t.Fatal(err)
	}
	b, err := os.ReadFile(stock)
	if err != nil {
		t.Fatal(err)
	}
	if !bytes.Equal(a, b) {
		t.Errorf("reuse codec file (%d bytes) differs from Arrow codec file (%d bytes)", len(a), len(b))
	}
	for _, p := range []string{reused, stock} {
		n, _, cols := independentRead(t, p)
		if n != int64(len(rows)) {
			t.Fatalf("%s: %d rows", p, n)
		}
		checkMixed(t, cols, rows)
	}
}

// TestRawFrame: appendRawFrame writes the frame RFC 8878 (section 3.1.1)
// describes: magic 0xFD2FB528, a descriptor with Single_Segment_Flag and a
// 4-byte Frame_Content_Size, then Raw_Blocks of at most 128 KiB, the last
// one flagged. github.com/klauspost/compress/zstd and Arrow's codec must
// decode it back to the input, at every block boundary.
func TestRawFrame(t *testing.T) {
	dec, err := zstd.NewReader(nil)
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	rng := rand.New(rand.NewPCG(5, 6))
	for _, n := range []int{0, 1, 1000, 128<<10 - 1, 128 << 10, 128<<10 + 1, 3 << 20, 3<<20 + 7} {
		src := make([]byte, n)
		for i := range src {
			src[i] = byte(rng.Uint32())
		}
		frame := appendRawFrame([]byte("prefix"), src)[len("prefix"):]
		blocks := max(1, (n+128<<10-1)/(128<<10))
		if want := 4 + 1 + 4 + 3*blocks + n; len(frame) != want {
			t.Fatalf("%d bytes: frame of %d bytes, want %d", n, len(frame), want)
		}
		if !bytes.Equal(frame[:5], []byte{0x28, 0xB5, 0x2F, 0xFD, 0xA0}) {
			t.Fatalf("%d bytes: header % x", n, frame[:5])
		}
		got, err := dec.DecodeAll(frame, nil)
		if err != nil || !bytes.Equal(got, src) {
			t.Fatalf("%d bytes: klauspost decoder: %v, equal %v", n, err, bytes.Equal(got, src))
		}
		got = stockZstd.Decode(make([]byte, n), frame)
		if !bytes.Equal(got, src) {
			t.Fatalf("%d bytes: Arrow's codec decodes something else", n)
		}
	}
}

// TestEncodePageRawOnlyWhenIncompressible: a page of random bytes (as full
// precision floats are) is stored raw, costing only the frame and block
// headers; a compressible page of the same size is compressed as before
// (equal to Arrow's codec output); small pages are never probed. All decode.
func TestEncodePageRawOnlyWhenIncompressible(t *testing.T) {
	dec, err := zstd.NewReader(nil)
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	rng := rand.New(rand.NewPCG(7, 8))
	random := make([]byte, 1<<20)
	for i := range random {
		random[i] = byte(rng.Uint32())
	}
	quantised := make([]byte, 0, 1<<20) // few distinct float64 values
	for len(quantised) < 1<<20 {
		quantised = binary.LittleEndian.AppendUint64(quantised, math.Float64bits(float64(rng.IntN(50))/10))
	}
	codec := reuseZstd{stockZstd}
	for _, c := range []struct {
		name string
		src  []byte
		raw  bool
	}{
		{"random", random, true},
		{"quantised", quantised, false},
		{"small random", random[:minProbedPage-1], false},
	} {
		got := codec.EncodeLevel(nil, c.src, 1)
		plain, err := dec.DecodeAll(got, nil)
		if err != nil || !bytes.Equal(plain, c.src) {
			t.Fatalf("%s: round trip: %v", c.name, err)
		}
		// Arrow passes a reused dst with room to spare and old contents.
		dst := bytes.Repeat([]byte{0xAA}, 3<<20)[:17]
		if again := codec.EncodeLevel(dst, c.src, 1); !bytes.Equal(again, got) {
			t.Errorf("%s: encoding into a used buffer gives other bytes", c.name)
		}
		isRaw := len(got) >= len(c.src) && bytes.Equal(got, appendRawFrame(nil, c.src))
		if isRaw != c.raw {
			t.Errorf("%s: stored raw = %v (%d of %d bytes), want %v", c.name, isRaw, len(got), len(c.src), c.raw)
		}
		if !c.raw && !bytes.Equal(got, stockZstd.EncodeLevel(nil, c.src, 1)) {
			t.Errorf("%s: compressed page differs from Arrow's codec output", c.name)
		}
	}
}
