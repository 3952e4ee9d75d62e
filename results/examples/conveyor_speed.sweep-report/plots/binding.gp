# binding: drawn by specloop from the CSV files in ../series (re-run: gnuplot binding.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,420 dynamic font 'Helvetica,12' background rgb 'white'; set output 'binding.svg' } else { set terminal pngcairo size 1200,560 font 'Helvetica,12' background rgb 'white'; set output 'binding.png' }
  set title 'Binding requirement (missed by the most, or the tightest at the optimum)' font ',13'
  unset object; unset arrow; unset label; unset colorbox
  set key outside right top box opaque font ',10'
  set grid noxtics noytics
  set xrange [-0.5:4.5]
  set yrange [-0.5:5.5]
  set xlabel 'requirements.overshoot\_max\_pct'
  set xtics ('4' 0, '8' 1, '12' 2, '16' 3, '20' 4)
  set ylabel 'plant.zeros[0]'
  set ytics ('-1' 0, '-2' 1, '-4' 2, '-9' 3, '-20' 4, '-60' 5)
  plot '../series/map.csv' using 1:($4 < 0 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#e3e3e3' title 'none (not run, failed, or no requirement)', \
       '../series/map.csv' using 1:($4 == 0 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#1f5f99' title 'peak\_time\_ratio (tp)', \
       '../series/map.csv' using 1:($4 == 1 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#c26a1b' title 'effort\_max (u)', \
       '../series/map.csv' using 1:($4 == 2 ? $2 : NaN):(0.5):(0.5) with boxxyerror fs solid 1.0 border lc rgb 'white' fc rgb '#7b5ea7' title 'overshoot\_max\_pct (OS)', \
       '../series/map.csv' using 1:($3 == 2 ? $2 : NaN) with points pt 2 ps 1.2 lc rgb '#222222' title 'missed (binding = missed by the most)', \
       '../series/map.csv' using 1:($4 >= 0 ? $2 : NaN):5 with labels offset 0,1.0 font ',9' tc rgb '#111111' notitle
  unset output
}
