package arrowio

import (
	"github.com/apache/arrow/go/v17/arrow"
	"github.com/apache/arrow/go/v17/arrow/memory"
)

// ReadFooter reads only the footer of the Parquet file at path and returns
// its row count, Arrow schema and key-value metadata (without the stored
// Arrow schema, as in Reader.Metadata). It is meant for verifying outputs
// after they are written. Errors read "read path: ..." and wrap
// ErrNotParquet where the file is not Parquet.
func ReadFooter(path string) (rows int64, schema *arrow.Schema, meta map[string]string, err error) {
	st, key, err := Locate(path)
	if err != nil {
		return 0, nil, nil, err
	}
	f, err := st.Open(background, key)
	if err != nil {
		return 0, nil, nil, err
	}
	if fo, ok := f.(interface{ footerOnly() }); ok {
		fo.footerOnly()
	}
	// No column data is read, so no Arrow buffers are allocated.
	r, err := newReader(path, f, memory.DefaultAllocator)
	if err != nil {
		_ = f.Close() // the open error is the one to report
		return 0, nil, nil, pathError("read", path, err)
	}
	defer r.Close()
	return r.NumRows(), r.Schema(), r.Metadata(), nil
}
