# front: drawn by specloop from the CSV files in ../series (re-run: gnuplot front.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,520 dynamic font 'Helvetica,12' background rgb 'white'; set output 'front.svg' } else { set terminal pngcairo size 1200,693 font 'Helvetica,12' background rgb 'white'; set output 'front.png' }
  set title 'Trade-off of the feasible designs (nonlinear loop)' font ',13'
  unset object; unset arrow; unset label
  set xlabel 'peak time (s)'
  set ylabel 'effort peak |u|'
  set key top right box opaque font ',10'
  unset colorbox
  plot '../series/front_all.csv' using 2:3 with points pt 7 ps 0.7 lc rgb '#9e9e9e' title 'feasible design', \
       '../series/front.csv' using 2:3 with steps lw 1.5 lc rgb '#1f5f99' notitle, \
       '../series/front.csv' using 2:3 with points pt 7 ps 1.2 lc rgb '#1f5f99' title 'non-dominated', \
       '../series/front.csv' using 2:3:(sprintf('#%d', $1)) with labels offset 1.2,0.6 font ',9' tc rgb '#1f5f99' notitle
  unset output
}
