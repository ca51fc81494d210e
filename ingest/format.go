package ingest

import "strconv"

func formatInt(v int64) string { return strconv.FormatInt(v, 10) }
