package peaks_test

import (
	"fmt"
	"math"

	"lineshot/peaks"
)

func ExampleFind() {
	y := make([]float64, 120)
	for i := range y {
		x := float64(i)
		y[i] = 10 + 200*math.Exp(-(x-30.2)*(x-30.2)/4.5) + 90*math.Exp(-(x-81.7)*(x-81.7)/3)
		y[i] += 0.5 * math.Sin(x*1.7) // a deterministic ripple standing in for noise
	}
	r, _ := peaks.Find(y, peaks.Options{})
	for _, p := range r.Peaks {
		fmt.Printf("centre %.1f FWHM %.1f\n", p.Center, p.FWHM)
	}
	// Output:
	// centre 30.2 FWHM 3.5
	// centre 81.7 FWHM 2.9
}
