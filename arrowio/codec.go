package arrowio

import (
	"encoding/binary"
	"sync"

	"github.com/apache/arrow/go/v17/parquet/compress"
	"github.com/klauspost/compress/zstd"
)

// The zstd codec registered by Arrow Go v17 builds a new encoder for every
// page it compresses (compress/zstd.go, EncodeLevel), which costs a large
// share of the write path's CPU. reuseZstd keeps one encoder per level and
// calls EncodeAll, which github.com/klauspost/compress/zstd documents as
// safe for concurrent use. The encoder options match Arrow's, so pages are
// the same standard zstd frames. Everything else is delegated to Arrow's
// codec.
//
// It is registered for compress.Codecs.Zstd in init, before any goroutine
// can read the codec table (RegisterCodec writes a plain map).

var stockZstd compress.Codec

func init() {
	c, err := compress.GetCodec(compress.Codecs.Zstd)
	if err != nil {
		panic("arrowio: arrow registers no zstd codec: " + err.Error())
	}
	stockZstd = c
	compress.RegisterCodec(compress.Codecs.Zstd, reuseZstd{c})
}

type reuseZstd struct{ compress.Codec }

// encoders holds one lazily built encoder per zstd.EncoderLevel.
var encoders [zstd.SpeedBestCompression + 1]struct {
	once sync.Once
	enc  *zstd.Encoder
}

func encoderFor(level zstd.EncoderLevel) *zstd.Encoder {
	e := &encoders[level]
	e.once.Do(func() {
		var err error
		e.enc, err = zstd.NewWriter(nil, zstd.WithZeroFrames(true), zstd.WithEncoderLevel(level))
		if err != nil {
			// Only invalid options fail, and these are fixed.
			panic("arrowio: zstd encoder: " + err.Error())
		}
	})
	return e.enc
}

// zstdLevel maps a Parquet compression level to an encoder level the way
// Arrow's codec does.
func zstdLevel(level int) zstd.EncoderLevel {
	if level == compress.DefaultCompressionLevel {
		return zstd.SpeedDefault
	}
	return zstd.EncoderLevelFromZstd(level)
}

func (reuseZstd) EncodeLevel(dst, src []byte, level int) []byte {
	return encodePage(encoderFor(zstdLevel(level)), dst, src)
}

func (reuseZstd) Encode(dst, src []byte) []byte {
	return encodePage(encoderFor(zstd.SpeedDefault), dst, src)
}

// Incompressible pages. A page of full-precision floats (most scaled
// columns) does not shrink under zstd, yet compressing it costs as much as
// compressing any other page: a third of the write path's CPU went to pages
// that came out no smaller. encodePage first compresses probeBytes from the
// middle of a page of at least minProbedPage bytes; when that probe saves
// less than 1/probeGain of its size the page is stored in raw blocks,
// which costs a copy. The decision depends only on the page's bytes, so
// outputs stay byte-identical across runs and worker counts.
const (
	probeBytes    = 16 << 10
	minProbedPage = 4 * probeBytes
	probeGain     = 32 // raw when the probe saves less than 1/32 (3%)
)

func encodePage(enc *zstd.Encoder, dst, src []byte) []byte {
	if len(src) >= minProbedPage {
		mid := len(src)/2 - probeBytes/2
		probe := enc.EncodeAll(src[mid:mid+probeBytes], dst[:0])
		if len(probe) > probeBytes-probeBytes/probeGain {
			return appendRawFrame(probe[:0], src)
		}
		dst = probe // reuse its allocation
	}
	return enc.EncodeAll(src, dst[:0])
}

// Zstandard frame layout (RFC 8878, "Zstandard Compression and the
// application/zstd Media Type", sections 3.1.1 and 3.1.1.2).
const (
	zstdMagic = 0xFD2FB528
	// Frame_Header_Descriptor: Frame_Content_Size_Flag 2 (a 4-byte
	// content size) and Single_Segment_Flag, so no Window_Descriptor; no
	// checksum, no dictionary.
	rawFrameDescriptor = 2<<6 | 1<<5
	// Block_Maximum_Size: the smaller of the window size (here the content
	// size) and 128 KiB.
	maxBlockBytes = 128 << 10
	blockTypeRaw  = 0
)

// appendRawFrame appends to dst one zstd frame holding src uncompressed, in
// Raw_Blocks. Pages are far below the 4 GiB a 4-byte content size allows.
func appendRawFrame(dst, src []byte) []byte {
	dst = binary.LittleEndian.AppendUint32(dst, zstdMagic)
	dst = append(dst, rawFrameDescriptor)
	dst = binary.LittleEndian.AppendUint32(dst, uint32(len(src)))
	for {
		n := min(len(src), maxBlockBytes)
		last := 0
		if n == len(src) {
			last = 1
		}
		// Block_Header: Last_Block (bit 0), Block_Type (bits 1-2),
		// Block_Size (bits 3-23), 3 bytes little-endian.
		h := uint32(n)<<3 | blockTypeRaw<<1 | uint32(last)
		dst = append(dst, byte(h), byte(h>>8), byte(h>>16))
		dst = append(dst, src[:n]...)
		src = src[n:]
		if last == 1 {
			return dst
		}
	}
}
