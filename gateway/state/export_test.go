package state

// PointV1 and DecodePointV1 let the external tests read stored points with
// the frozen codec, as the file held them before a migration; CopyTo copies
// a committed file into the test's temporary directory.
type PointV1 = pointV1

var DecodePointV1 = decodePointV1

var CopyTo = copyTo
