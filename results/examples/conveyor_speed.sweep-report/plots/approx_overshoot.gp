# approx_overshoot: drawn by specloop from the CSV files in ../series (re-run: gnuplot approx_overshoot.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,420 dynamic font 'Helvetica,12' background rgb 'white'; set output 'approx_overshoot.svg' } else { set terminal pngcairo size 1200,560 font 'Helvetica,12' background rgb 'white'; set output 'approx_overshoot.png' }
  set title 'Classical design: overshoot, simulated vs second-order prediction' font ',13'
  unset object; unset arrow; unset label; unset colorbox
  set key outside right top box opaque font ',10'
  set grid noxtics noytics
  set xrange [-0.5:4.5]
  set yrange [-0.5:5.5]
  set xlabel 'requirements.overshoot\_max\_pct'
  set xtics ('4' 0, '8' 1, '12' 2, '16' 3, '20' 4)
  set ylabel 'plant.zeros[0]'
  set ytics ('-1' 0, '-2' 1, '-4' 2, '-9' 3, '-20' 4, '-60' 5)
  set palette defined (-1 '#2166ac', -0.5 '#92c5de', 0 '#f7f7f7', 0.5 '#f4a582', 1 '#b2182b')
  set cbrange [-100:100]
  set colorbox; set cblabel '(simulated - predicted)/predicted (%)'
  plot '../series/approx_overshoot.csv' using 1:($4 == 0 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#e3e3e3' title 'no prediction (no classical design or no complex pair)', \
       '../series/approx_overshoot.csv' using 1:($4 == 1 ? $2 : NaN):(0.5):(0.5):(($3 > 100) ? 100 : (($3 < -100) ? -100 : $3)) with boxxyerror fs solid 1.0 border lc rgb 'white' fc palette notitle, \
       '../series/approx_overshoot_outline.csv' using 1:2:($3-$1):($4-$2) with vectors nohead lw 3 lc rgb '#111111' title '|error| > 10 % (outlined)', \
       '../series/approx_overshoot.csv' using 1:($4 == 1 ? $2 : NaN):(sprintf('%+.0f', $3)) with labels font ',8' tc rgb '#111111' notitle
  unset output
}
