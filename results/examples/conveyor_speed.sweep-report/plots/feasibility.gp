# feasibility: drawn by specloop from the CSV files in ../series (re-run: gnuplot feasibility.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,420 dynamic font 'Helvetica,12' background rgb 'white'; set output 'feasibility.svg' } else { set terminal pngcairo size 1200,560 font 'Helvetica,12' background rgb 'white'; set output 'feasibility.png' }
  set title 'Verdict of each point' font ',13'
  unset object; unset arrow; unset label; unset colorbox
  set key outside right top box opaque font ',10'
  set grid noxtics noytics
  set xrange [-0.5:4.5]
  set yrange [-0.5:5.5]
  set xlabel 'requirements.overshoot\_max\_pct'
  set xtics ('4' 0, '8' 1, '12' 2, '16' 3, '20' 4)
  set ylabel 'plant.zeros[0]'
  set ytics ('-1' 0, '-2' 1, '-4' 2, '-9' 3, '-20' 4, '-60' 5)
  plot '../series/map.csv' using 1:($3 == 0 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#2e7d32' title 'met, confirmed', \
       '../series/map.csv' using 1:($3 == 1 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#f2b705' title 'met on the linear loop, not confirmed', \
       '../series/map.csv' using 1:($3 == 2 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#c62828' title 'missed', \
       '../series/map.csv' using 1:($3 == 3 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#6d4c41' title 'failed', \
       '../series/map.csv' using 1:($3 == 4 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#e3e3e3' title 'not run yet'
  unset output
}
