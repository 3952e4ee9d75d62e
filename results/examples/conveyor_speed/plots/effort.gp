# effort: drawn by specloop from the CSV files in ../series (re-run: gnuplot effort.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,520 dynamic font 'Helvetica,12' background rgb 'white'; set output 'effort.svg' } else { set terminal pngcairo size 1200,693 font 'Helvetica,12' background rgb 'white'; set output 'effort.png' }
  set title 'Control effort u(t)' font ',13'
  set xlabel 'time (s)'
  set ylabel 'u (V)'
  set xrange [0:12.20200231]
  set key outside right top vertical Left reverse box opaque font ',10' samplen 2
  unset object; unset arrow; unset label
  plot 24 with lines lc rgb '#c62828' dt 2 lw 1.5 title 'actuator limits', \
       -24 with lines lc rgb '#c62828' dt 2 lw 1.5 notitle, \
       24 with lines lc rgb '#6a1b9a' dt 3 lw 1.2 title 'effort\_max 24 V', \
       -24 with lines lc rgb '#6a1b9a' dt 3 lw 1.2 notitle, \
       '../series/step_reference.csv' every 2 using 1:3 with lines lc rgb '#8c8c8c' lw 1.2  title 'reference (P only)', \
       '../series/step_classical.csv' every 2 using 1:3 with lines lc rgb '#c26a1b' lw 2  title 'classical', \
       '../series/step_optimized.csv' every 2 using 1:3 with lines lc rgb '#1f5f99' lw 2  title 'optimized', \
       '../series/step_optimized_nonlinear.csv' every 2 using 1:3 with lines lc rgb '#2e7d32' lw 2 dt (8,4) title 'optimized (nonlinear loop)'
  unset output
}
