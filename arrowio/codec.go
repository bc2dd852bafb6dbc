package arrowio

import (
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
	return encoderFor(zstdLevel(level)).EncodeAll(src, dst[:0])
}

func (reuseZstd) Encode(dst, src []byte) []byte {
	return encoderFor(zstd.SpeedDefault).EncodeAll(src, dst[:0])
}
