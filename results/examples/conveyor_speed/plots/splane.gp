# splane: drawn by specloop from the CSV files in ../series (re-run: gnuplot splane.gp)
set datafile separator ','
set key top right box opaque font ',10'
set grid lc rgb '#dddddd' lw 1
set border lc rgb '#555555'
set tics textcolor rgb '#333333'
do for [term in 'svg png'] {
  if (term eq 'svg') { set terminal svg size 900,520 dynamic font 'Helvetica,12' background rgb 'white'; set output 'splane.svg' } else { set terminal pngcairo size 1200,693 font 'Helvetica,12' background rgb 'white'; set output 'splane.png' }
  set title 's-plane: root locus of the optimized loop as its gain varies' font ',13'
  set xlabel 'real (1/s)'
  set ylabel 'imaginary (rad/s)'
  set xrange [-59.16755007:14.79188752]
  set yrange [-35.50053004:35.50053004]
  set size ratio -1
  set key outside right top vertical Left reverse box opaque font ',9' samplen 2
  set arrow from graph 0,first 0 to graph 1,first 0 nohead lc rgb '#999999'
  set arrow from first 0,graph 0 to first 0,graph 1 nohead lc rgb '#999999'
  plot for [b=0:5] '../series/locus.csv' using ((column(2) == b) ? $3 : NaN):4 with lines lc rgb '#1f5f99' lw 1.3 title (b == 0 ? 'root locus (gain × 0.001 … 1000)' : ''), \
       '../series/splane_points.csv' using ((strcol(1) eq 'damping_line_upper') ? $3 : NaN):4 with lines lc rgb '#c62828' dt 2 lw 1.3 title 'ζ = 0.559 line (overshoot limit)', \
       '../series/splane_points.csv' using ((strcol(1) eq 'damping_line_lower') ? $3 : NaN):4 with lines lc rgb '#c62828' dt 2 lw 1.3 notitle, \
       '../series/splane_points.csv' using ((strcol(1) eq 'open_loop_pole') ? $3 : NaN):4 with points pt 2 ps 1.6 lw 2 lc rgb '#222222' title 'open-loop poles', \
       '../series/splane_points.csv' using ((strcol(1) eq 'open_loop_zero') ? $3 : NaN):4 with points pt 6 ps 1.6 lw 2 lc rgb '#222222' title 'open-loop zeros', \
       '../series/splane_points.csv' using ((strcol(1) eq 'closed_loop_pole' && strcol(2) eq 'reference') ? $3 : NaN):4 with points pt 7 ps 1.0 lc rgb '#8c8c8c' title 'reference closed-loop poles', \
       '../series/splane_points.csv' using ((strcol(1) eq 'closed_loop_pole' && strcol(2) eq 'classical') ? $3 : NaN):4 with points pt 7 ps 1.0 lc rgb '#c26a1b' title 'classical closed-loop poles', \
       '../series/splane_points.csv' using ((strcol(1) eq 'closed_loop_pole' && strcol(2) eq 'optimized') ? $3 : NaN):4 with points pt 7 ps 1.0 lc rgb '#1f5f99' title 'optimized closed-loop poles', \
       '../series/splane_points.csv' using ((strcol(1) eq 'dominant_pair') ? $3 : NaN):4 with points pt 12 ps 2.8 lw 2 lc rgb '#1f5f99' title 'dominant pair (recommended design)', \
       '../series/splane_points.csv' using ((strcol(1) eq 'breaks_approximation') ? $3 : NaN):4 with points pt 3 ps 2.2 lw 2 lc rgb '#c62828' title 'modes that break the approximation'
  unset output
}
