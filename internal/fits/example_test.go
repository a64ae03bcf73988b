package fits_test

import (
	"bytes"
	"fmt"

	"stillsky/internal/fits"
)

// Write a 3×2 float32 image with two keywords and read it back: the file is a
// whole number of 2880-byte records, one for the header and one for the data.
func ExampleWrite() {
	img := &fits.HDU{Bitpix: -32, Axes: []int{3, 2}, Data: []float32{1, 2, 3, 4, 5, 6}}
	img.Header.Set("BUNIT", "rad", "phase at 500 nm")
	img.Header.Set("PIXSCALE", 0.02, "metres per pixel")
	var buf bytes.Buffer
	if err := fits.Write(&buf, img); err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(buf.Len(), "bytes")
	hdus, err := fits.Read(&buf)
	if err != nil {
		fmt.Println(err)
		return
	}
	unit, _ := hdus[0].Header.String("BUNIT")
	scale, _ := hdus[0].Header.Float("PIXSCALE")
	fmt.Println(hdus[0].Axes, hdus[0].Data, unit, scale)
	// Output:
	// 5760 bytes
	// [3 2] [1 2 3 4 5 6] rad 0.02
}
